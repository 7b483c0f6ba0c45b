// gyre bench MODEL: inference speed of a model file on this CPU with the embedded runtime.
// Latency of one text of --tokens tokens (p50/p99) and throughput of --batch texts, at each
// thread count in --threads; each thread owns a Context (the Model is shared, read-only).

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cstdio>
#include <memory>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/runtime/model.hpp"

namespace gyre::cli {
namespace {

using Clock = std::chrono::steady_clock;

struct BenchOptions {
  std::string model;
  std::size_t tokens = 20;
  std::size_t batch = 64;
  double seconds = 2.0;
  std::vector<int> threads = {1, 2};
};

// Deterministic "texts": vocabulary tokens chosen by a fixed linear congruential sequence.
std::vector<std::vector<std::uint32_t>> make_texts(const runtime::Model& m, std::size_t count, std::size_t tokens) {
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

void infer(runtime::Context& ctx, const std::vector<std::uint32_t>& ids) {
  if (ctx.model().architecture().task == runtime::Task::kClassify) {
    ctx.classify_ids(ids);
  } else {
    ctx.tag_ids(ids);
  }
}

double percentile(std::vector<double> v, double p) {
  std::sort(v.begin(), v.end());
  const auto i = static_cast<std::size_t>(p * static_cast<double>(v.size() - 1) + 0.5);
  return v[std::min(i, v.size() - 1)];
}

ExitCode run_bench(const BenchOptions& o) {
  std::optional<runtime::Model> loaded;
  try {
    loaded = runtime::Model::load(o.model);
  } catch (const runtime::Error& e) {
    throw FormatError(o.model, e.what());
  }
  const runtime::Model& model = *loaded;
  if (o.tokens == 0 || o.batch == 0) throw ConfigError("--tokens/--batch", "must be at least 1");
  const auto& a = model.architecture();
  std::printf("model     %s: %s %s, embedding %zu, hidden %zu, %zu layer(s)%s, %zu labels\n", o.model.c_str(),
              runtime::to_string(a.task), runtime::to_string(a.cell), a.embedding_size, a.hidden_size, a.layers,
              a.bidirectional ? ", bidirectional" : "", model.labels().size());
  std::printf("kernels   %s; hardware threads %u\n", runtime::Model::kernel_name(), std::thread::hardware_concurrency());
  const double flops_text = model.flops(o.tokens);
  const auto one = make_texts(model, 1, o.tokens);
  const auto batch = make_texts(model, o.batch, o.tokens);
  for (int nthreads : o.threads) {
    if (nthreads < 1) throw ConfigError("--threads", "thread counts must be >= 1");
    // Latency: each thread classifies the same text over and over; all timings pooled.
    std::vector<std::vector<double>> lat(static_cast<std::size_t>(nthreads));
    std::vector<std::thread> pool;
    const auto budget = std::chrono::duration<double>(o.seconds / 2);
    for (int t = 0; t < nthreads; ++t)
      pool.emplace_back([&, t] {
        runtime::Context ctx(model);
        for (int w = 0; w < 20; ++w) infer(ctx, one[0]);  // warm-up: buffers sized, caches hot
        const auto start = Clock::now();
        auto& mine = lat[static_cast<std::size_t>(t)];
        mine.reserve(1 << 16);
        while (Clock::now() - start < budget || mine.size() < 200) {
          const auto t0 = Clock::now();
          infer(ctx, one[0]);
          mine.push_back(std::chrono::duration<double, std::micro>(Clock::now() - t0).count());
        }
      });
    for (auto& th : pool) th.join();
    pool.clear();
    std::vector<double> all;
    for (const auto& l : lat) all.insert(all.end(), l.begin(), l.end());
    const double p50 = percentile(all, 0.50), p99 = percentile(all, 0.99);
    // Throughput: the batch split across the threads (text i goes to thread i % n), repeated.
    std::atomic<std::size_t> texts_done{0};
    const auto t0 = Clock::now();
    for (int t = 0; t < nthreads; ++t)
      pool.emplace_back([&, t] {
        runtime::Context ctx(model);
        for (std::size_t i = static_cast<std::size_t>(t); i < batch.size(); i += static_cast<std::size_t>(nthreads))
          infer(ctx, batch[i]);  // warm-up pass
        std::size_t done = 0;
        const auto start = Clock::now();
        while (Clock::now() - start < budget) {
          for (std::size_t i = static_cast<std::size_t>(t); i < batch.size(); i += static_cast<std::size_t>(nthreads)) {
            infer(ctx, batch[i]);
            ++done;
          }
        }
        texts_done += done;
      });
    for (auto& th : pool) th.join();
    const double elapsed = std::chrono::duration<double>(Clock::now() - t0).count();
    const double per_sec = static_cast<double>(texts_done.load()) / elapsed;
    std::printf("threads %d  latency (%zu tokens): p50 %.1f us, p99 %.1f us (%.2f GFLOP/s per stream)\n", nthreads,
                o.tokens, p50, p99, flops_text / (p50 * 1e3));
    std::printf("           throughput (batch %zu): %.0f texts/s, %.2f GFLOP/s total\n", o.batch, per_sec,
                per_sec * flops_text / 1e9);
  }
  std::printf("note      model-only timings (token ids in, probabilities out); %.3f MFLOP per text\n",
              flops_text / 1e6);
  return ExitCode::kOk;
}

const RegisterCommand registration{
    "bench", "Measure inference latency and throughput of a model file on this CPU", 90, [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<BenchOptions>();
      sub.add_option("model", o->model, "Model file (.gyre)")->required()->check(CLI::ExistingFile);
      sub.add_option("--tokens", o->tokens, "Tokens per text")->capture_default_str();
      sub.add_option("--batch", o->batch, "Texts per throughput batch")->capture_default_str();
      sub.add_option("--seconds", o->seconds, "Measuring time per thread count (split between latency and throughput)")
          ->capture_default_str()
          ->check(CLI::PositiveNumber);
      sub.add_option("--threads", o->threads, "Thread counts to measure")->capture_default_str()->delimiter(',');
      sub.footer("Example:\n  gyre bench model.gyre --threads 1,2\n"
                 "Set GYRE_RUNTIME_ISA=portable|avx2|avx512 to cap the kernels used.");
      return [o] { return run_bench(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
