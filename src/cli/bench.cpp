// gyre bench MODEL: inference speed of a model on this CPU with the embedded runtime.
// Latency of one text of --tokens tokens (p50/p99), model-only (token ids in) and end to end
// (UTF-8 text in: normalisation and tokenization included), and throughput of --batch-size texts,
// at each thread count in --threads; each thread owns a Context (the Model is shared, read-only).
// With --batched the throughput batch is also timed through the batched call
// (Context::classify_batch_ids / tag_batch_ids): each thread passes its share in one call.
// MODEL may be a run directory or a checkpoint: it is then exported at f32 to a temporary file
// first, so the figures are those of `gyre export --precision f32`.

#include <sys/resource.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"

namespace gyre::cli {
namespace {

using Clock = std::chrono::steady_clock;

struct BenchOptions {
  std::string model;
  std::size_t tokens = 20;
  std::size_t batch_size = 64;
  double seconds = 2.0;
  std::vector<int> threads = {1, 2};
  bool batched = false;
};

// Deterministic "texts": vocabulary tokens chosen by a fixed linear congruential sequence.
std::vector<std::vector<std::uint32_t>> make_texts(const runtime::Model& m, std::size_t count,
                                                   std::size_t tokens) {
  std::vector<std::vector<std::uint32_t>> texts(count);
  std::uint64_t s = 12345;
  const std::uint64_t v = m.vocabulary_size();
  for (auto& t : texts)
    for (std::size_t i = 0; i < tokens; ++i) {
      s = s * 6364136223846793005ULL + 1442695040888963407ULL;  // Knuth's MMIX LCG constants
      t.push_back(v > 2 ? static_cast<std::uint32_t>(2 + (s >> 33) % (v - 2)) : 1U);
    }
  return texts;
}

// The same texts as UTF-8: the tokens' spellings joined by spaces (the tokenizer may cut a
// vocabulary token differently, so the real token counts are measured and printed).
std::vector<std::string> as_text(const runtime::Model& m,
                                 const std::vector<std::vector<std::uint32_t>>& ids) {
  std::vector<std::string> texts;
  for (const auto& t : ids) {
    std::string s;
    for (const auto id : t) {
      if (!s.empty()) s += ' ';
      s += m.token(id);
    }
    texts.push_back(std::move(s));
  }
  return texts;
}

void infer_text(runtime::Context& ctx, const std::string& text) {
  if (ctx.model().architecture().task == runtime::Task::kClassify) {
    ctx.classify(text);
  } else {
    ctx.tag(text);
  }
}

void infer(runtime::Context& ctx, const std::vector<std::uint32_t>& ids) {
  const runtime::Model& m = ctx.model();
  if (m.architecture().has_char_encoder() || m.architecture().has_ngram_part()) {
    // The character encoder reads the tokens' characters, the n-gram part their words: pass the
    // tokens as text, so the timing includes their normalization and lookups (as an application's
    // calls would).
    thread_local std::vector<std::string> tokens;
    tokens.resize(ids.size());
    for (std::size_t i = 0; i < ids.size(); ++i) tokens[i].assign(m.token(ids[i]));
    if (m.architecture().task == runtime::Task::kClassify)
      ctx.classify_tokens(tokens);
    else
      ctx.tag_tokens(tokens);
    return;
  }
  if (m.architecture().task == runtime::Task::kClassify) {
    ctx.classify_ids(ids);
  } else {
    ctx.tag_ids(ids);
  }
}

// One thread's share of the batch through the batched call: ids (or, for a character encoder,
// the tokens' spellings, as infer() passes them).
struct BatchShare {
  std::vector<Span<const std::uint32_t>> ids;
  std::vector<std::vector<std::string>> tokens;
  std::vector<Span<const std::string>> token_spans;
};

BatchShare make_share(const runtime::Model& m, const std::vector<std::vector<std::uint32_t>>& batch,
                      std::size_t first, std::size_t step) {
  BatchShare s;
  for (std::size_t i = first; i < batch.size(); i += step)
    s.ids.emplace_back(batch[i].data(), batch[i].size());
  if (m.architecture().has_char_encoder() || m.architecture().has_ngram_part()) {
    for (const auto& ids : s.ids) {
      std::vector<std::string> t;
      for (const auto id : ids) t.emplace_back(m.token(id));
      s.tokens.push_back(std::move(t));
    }
    for (const auto& t : s.tokens) s.token_spans.emplace_back(t.data(), t.size());
  }
  return s;
}

void infer_batch(runtime::Context& ctx, const BatchShare& share) {
  const runtime::Model& m = ctx.model();
  const bool classify = m.architecture().task == runtime::Task::kClassify;
  if (m.architecture().has_char_encoder() || m.architecture().has_ngram_part()) {
    if (classify)
      ctx.classify_batch_tokens(share.token_spans);
    else
      ctx.tag_batch_tokens(share.token_spans);
  } else if (classify) {
    ctx.classify_batch_ids(share.ids);
  } else {
    ctx.tag_batch_ids(share.ids);
  }
}

double percentile(std::vector<double> v, double p) {
  std::sort(v.begin(), v.end());
  const auto i = static_cast<std::size_t>(p * static_cast<double>(v.size() - 1) + 0.5);
  return v[std::min(i, v.size() - 1)];
}

// An exported file as it is; a run directory or checkpoint exported at f32 to a temporary file
// that is removed once mapped (the mapping stays valid after the unlink).
runtime::Model load_model(const std::string& model_or_run, bool& exported_here) {
  io::TrainedModel trained = io::load_trained_model(model_or_run, io::Engine::kRuntimeForExported);
  exported_here = !trained.runtime.has_value();
  if (trained.runtime) return std::move(*trained.runtime);
  const auto tmp = std::filesystem::temp_directory_path() /
                   ("gyre-bench-" + std::to_string(static_cast<long long>(::getpid())) + ".gyre");
  io::export_model(trained, tmp, runtime::DType::kF32);
  std::optional<runtime::Model> model;
  try {
    model = runtime::Model::load(tmp.string());
  } catch (const runtime::Error& e) {
    std::filesystem::remove(tmp);
    throw FormatError(trained.path.string(), e.what());
  }
  std::filesystem::remove(tmp);
  return std::move(*model);
}

struct Timing {
  double p50 = 0, p99 = 0;
};

// Each of n threads runs `one` over and over for `seconds`; all timings pooled.
template <typename F>
Timing latency(int nthreads, double seconds, const runtime::Model& model, F one) {
  std::vector<std::vector<double>> lat(static_cast<std::size_t>(nthreads));
  std::vector<std::thread> pool;
  const auto budget = std::chrono::duration<double>(seconds);
  for (int t = 0; t < nthreads; ++t)
    pool.emplace_back([&, t] {
      runtime::Context ctx(model);
      for (int w = 0; w < 20; ++w) one(ctx);  // warm-up: buffers sized, caches hot
      const auto start = Clock::now();
      auto& mine = lat[static_cast<std::size_t>(t)];
      mine.reserve(1 << 16);
      while (Clock::now() - start < budget || mine.size() < 200) {
        const auto t0 = Clock::now();
        one(ctx);
        mine.push_back(std::chrono::duration<double, std::micro>(Clock::now() - t0).count());
      }
    });
  for (auto& th : pool) th.join();
  std::vector<double> all;
  for (const auto& l : lat) all.insert(all.end(), l.begin(), l.end());
  return {percentile(all, 0.50), percentile(all, 0.99)};
}

std::string gib(double bytes) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f GiB", bytes / (1024.0 * 1024.0 * 1024.0));
  return buf;
}

// Refuses (exit code 2) what cannot run on this machine before starting any of it: the texts
// (token ids) and, per thread, a stack and a Context's buffers for a text of --tokens tokens.
// The Context part counts only the gate values and states of the recurrent layers, so the
// figure is a lower bound.
void check_resources(const runtime::Model& model, const BenchOptions& o) {
  const auto& a = model.architecture();
  const double tokens = static_cast<double>(o.tokens);
  const double texts_bytes = (static_cast<double>(o.batch_size) + 1) * (tokens * 4 + 24);
  const double context_bytes =
      4 * tokens *
      static_cast<double>(a.embedding_size + a.layers * a.directions() * (a.gates() + 2) * a.hidden_size);
  rlimit stack{};
  const double stack_bytes = ::getrlimit(RLIMIT_STACK, &stack) == 0 && stack.rlim_cur != RLIM_INFINITY
                                 ? static_cast<double>(stack.rlim_cur)
                                 : 8.0 * 1024 * 1024;
  const int most_threads = *std::max_element(o.threads.begin(), o.threads.end());
  const double need = texts_bytes + most_threads * (stack_bytes + 2 * context_bytes);
  const double have =
      static_cast<double>(::sysconf(_SC_PHYS_PAGES)) * static_cast<double>(::sysconf(_SC_PAGESIZE));
  if (!(have > 0) || need <= have) return;
  throw ConfigError(texts_bytes >= need / 2 ? (o.batch_size > o.tokens ? "batch_size" : "tokens") : "threads",
                    "this benchmark needs at least " + gib(need) + " of memory (" + gib(texts_bytes) +
                        " for " + std::to_string(o.batch_size) + " texts of " + std::to_string(o.tokens) +
                        " tokens; " + gib(most_threads * (stack_bytes + 2 * context_bytes)) + " for " +
                        std::to_string(most_threads) + " threads' stacks and buffers), more than the " +
                        gib(have) +
                        " this machine has; choose a smaller --batch-size, --tokens or --threads");
}

ExitCode run_bench(const BenchOptions& o) {
  if (o.threads.empty()) throw ConfigError("threads", "give at least one thread count");
  for (const int n : o.threads)
    if (n < 1) throw ConfigError("threads", "thread counts must be at least 1, not " + std::to_string(n));
  bool exported_here = false;
  const runtime::Model model = load_model(o.model, exported_here);
  if (o.tokens == 0) throw ConfigError("tokens", "must be at least 1");
  if (o.batch_size == 0) throw ConfigError("batch_size", "must be at least 1");
  check_resources(model, o);
  const auto& a = model.architecture();
  std::printf("model     %s: %s %s, embedding %zu, hidden %zu, %zu layer(s)%s, %zu labels\n", o.model.c_str(),
              runtime::to_string(a.task), runtime::to_string(a.cell), a.embedding_size, a.hidden_size,
              a.layers, a.bidirectional ? ", bidirectional" : "", model.labels().size());
  if (exported_here) std::printf("          (a checkpoint: timed as exported at f32)\n");
  std::printf("kernels   %s; hardware threads %u\n", runtime::Model::kernel_name(),
              std::thread::hardware_concurrency());
  const double flops_text = model.flops(o.tokens);
  const auto one = make_texts(model, 1, o.tokens);
  const auto batch = make_texts(model, o.batch_size, o.tokens);
  const std::string one_text = as_text(model, one)[0];
  const std::size_t text_tokens = model.tokenizer().tokenize(one_text).size();
  for (int nthreads : o.threads) {
    if (nthreads < 1) throw ConfigError("--threads", "thread counts must be >= 1");
    // Latency: a third of the time model-only, a third end to end, a third for throughput (a
    // quarter each, and a quarter for the batched call, with --batched).
    const double part = o.seconds / (o.batched ? 4 : 3);
    const Timing ids = latency(nthreads, part, model, [&](runtime::Context& c) { infer(c, one[0]); });
    const Timing text = latency(nthreads, part, model, [&](runtime::Context& c) { infer_text(c, one_text); });
    const auto budget = std::chrono::duration<double>(part);
    // Throughput: the batch split across the threads (text i goes to thread i % n), repeated.
    auto throughput = [&](bool batched_call) {
      std::vector<std::thread> pool;
      std::atomic<std::size_t> texts_done{0};
      const auto t0 = Clock::now();
      for (int t = 0; t < nthreads; ++t)
        pool.emplace_back([&, t] {
          runtime::Context ctx(model);
          const auto first = static_cast<std::size_t>(t), step = static_cast<std::size_t>(nthreads);
          const BatchShare share = batched_call ? make_share(model, batch, first, step) : BatchShare{};
          auto pass = [&] {
            if (batched_call) {
              infer_batch(ctx, share);
              return share.ids.size();
            }
            std::size_t n = 0;
            for (std::size_t i = first; i < batch.size(); i += step, ++n) infer(ctx, batch[i]);
            return n;
          };
          pass();  // warm-up pass
          std::size_t done = 0;
          const auto start = Clock::now();
          while (Clock::now() - start < budget) done += pass();
          texts_done += done;
        });
      for (auto& th : pool) th.join();
      const double elapsed = std::chrono::duration<double>(Clock::now() - t0).count();
      return static_cast<double>(texts_done.load()) / elapsed;
    };
    const double per_sec = throughput(false);
    const double batched_per_sec = o.batched ? throughput(true) : 0.0;
    std::printf(
        "threads %d  latency, model only (%zu token ids in): p50 %.1f us, p99 %.1f us (%.2f GFLOP/s per "
        "stream)\n",
        nthreads, o.tokens, ids.p50, ids.p99, flops_text / (ids.p50 * 1e3));
    std::printf(
        "           latency, end to end (text in, %zu tokens after tokenization): p50 %.1f us, p99 %.1f us\n",
        text_tokens, text.p50, text.p99);
    std::printf("           throughput, model only (batch of %zu): %.0f texts/s, %.2f GFLOP/s total\n",
                o.batch_size, per_sec, per_sec * flops_text / 1e9);
    if (o.batched)
      std::printf("           throughput, batched call (batch of %zu): %.0f texts/s, %.2f GFLOP/s total\n",
                  o.batch_size, batched_per_sec, batched_per_sec * flops_text / 1e9);
  }
  std::printf(
      "note      model only: token ids in, probabilities out; end to end: UTF-8 text in (normalisation,\n"
      "          tokenization, vocabulary look-up), probabilities out; %.3f MFLOP per text\n",
      flops_text / 1e6);
  return ExitCode::kOk;
}

const RegisterCommand registration{
    "bench", "Measure inference latency and throughput of a model file on this CPU", 90,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<BenchOptions>();
      sub.add_option("model", o->model, "run directory, checkpoint or exported model")->required();
      sub.add_option("--tokens", o->tokens, "tokens per text")->capture_default_str();
      sub.add_option("--batch-size", o->batch_size, "texts per throughput batch")->capture_default_str();
      sub.add_option("--seconds", o->seconds,
                     "measuring time per thread count (split between the two latencies and throughput)")
          ->capture_default_str()
          ->check(CLI::Validator(
              [](const std::string& text) -> std::string {
                // CLI11's PositiveNumber lets "nan" through (every comparison with NaN is false).
                double v = 0;
                if (!CLI::detail::lexical_cast(text, v) || !std::isfinite(v) || v <= 0 || v > 86400)
                  return "'" + text + "' is not a number of seconds in (0, 86400]";
                return std::string();
              },
              "FINITE>0", "seconds"));
      sub.add_option("--threads", o->threads, "thread counts to measure, comma-separated")
          ->capture_default_str()
          ->delimiter(',');
      sub.add_flag("--batched", o->batched,
                   "also time the throughput batch through the batched call (one call per thread for its "
                   "share of the batch)");
      sub.footer(
          "Examples:\n  gyre bench intents.gyre --threads 1,2\n  gyre bench runs/intents-lstm\n"
          "  gyre bench intents.gyre --threads 1 --batched\n"
          "Set GYRE_RUNTIME_ISA=portable|avx2|avx512 to cap the kernels used.");
      return [o] { return run_bench(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
