// Recurrent-layer training throughput: embedding -> RnnStack -> head -> mean cross-entropy,
// forward + backward, no optimizer step (gradients are zeroed before each batch), the same
// workloads as tools/bench/rnn_torch.py. Driven by tools/bench/run_rnn_bench.sh; see
// tools/bench/README.md.
//
//   bench_rnn [--threads 1|2] [--seconds S] [--workloads lstm-64,gru-256,...]
//
// --threads 2 is a data-parallel split (the library's Eigen is built without OpenMP, so
// Eigen::setNbThreads() would change nothing): the batch's sequences are dealt alternately to
// two model replicas (balanced lengths; batches are sorted by length), each runs forward and
// backward on its half in its own thread, then replica 1's gradients are added into replica 0's
// (the reduction is timed too).
// Output: one JSON object per workload, with tokens per wall-clock second and per CPU second.

#include <algorithm>
#include <barrier>
#include <chrono>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <ctime>
#include <memory>
#include <span>
#include <stdexcept>
#include <string>
#include <thread>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/nn/embedding.hpp"
#include "gyre/nn/linear.hpp"
#include "gyre/nn/loss.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/pooling.hpp"
#include "gyre/nn/rnn_stack.hpp"

namespace {

using gyre::nn::Matrix;

// Workload constants shared with rnn_torch.py.
constexpr int kVocab = 10000;
constexpr int kEmbed = 128;
constexpr int kBatch = 32;
constexpr int kMinLen = 8;
constexpr int kMaxLen = 64;
constexpr int kClasses = 8;
constexpr int kTags = 9;
constexpr int kPool = 16;
constexpr std::uint64_t kSeed = 20261201;

// splitmix64 (Steele, Lea & Flood 2014); rnn_torch.py has the same generator and draw order.
struct SplitMix64 {
  std::uint64_t state;
  std::uint64_t next() {
    state += 0x9E3779B97F4A7C15ULL;
    std::uint64_t z = state;
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
  }
};

struct Batch {
  int T = 0;
  std::vector<int> lengths;          // [B]
  std::vector<std::int32_t> ids;     // [T*B] time-major, 0 = padding
  std::vector<int> labels;           // [B]
  std::vector<int> tags;             // [T*B], -1 on padding
  long tokens = 0;
};

std::vector<Batch> make_batches() {
  SplitMix64 rng{kSeed};
  std::vector<Batch> out;
  for (int n = 0; n < kPool; ++n) {
    Batch b;
    for (int i = 0; i < kBatch; ++i) b.lengths.push_back(kMinLen + static_cast<int>(rng.next() % (kMaxLen - kMinLen + 1)));
    std::sort(b.lengths.begin(), b.lengths.end(), std::greater<>());
    b.T = b.lengths[0];
    b.ids.assign(static_cast<std::size_t>(b.T * kBatch), 0);
    b.tags.assign(static_cast<std::size_t>(b.T * kBatch), -1);
    for (int s = 0; s < kBatch; ++s)
      for (int t = 0; t < b.lengths[static_cast<std::size_t>(s)]; ++t)
        b.ids[static_cast<std::size_t>(t * kBatch + s)] = static_cast<std::int32_t>(2 + rng.next() % (kVocab - 2));
    for (int s = 0; s < kBatch; ++s) b.labels.push_back(static_cast<int>(rng.next() % kClasses));
    for (int s = 0; s < kBatch; ++s)
      for (int t = 0; t < b.lengths[static_cast<std::size_t>(s)]; ++t)
        b.tags[static_cast<std::size_t>(t * kBatch + s)] = static_cast<int>(rng.next() % kTags);
    for (int len : b.lengths) b.tokens += len;
    out.push_back(std::move(b));
  }
  return out;
}

// The sequences of `b` whose index is congruent to `part` modulo `parts`, as a batch of its own.
Batch slice(const Batch& b, int part, int parts) {
  Batch s;
  std::vector<int> members;
  for (int i = part; i < kBatch; i += parts) members.push_back(i);
  const int B = static_cast<int>(members.size());
  for (int i : members) s.lengths.push_back(b.lengths[static_cast<std::size_t>(i)]);
  s.T = *std::max_element(s.lengths.begin(), s.lengths.end());
  s.ids.assign(static_cast<std::size_t>(s.T * B), 0);
  s.tags.assign(static_cast<std::size_t>(s.T * B), -1);
  for (int j = 0; j < B; ++j) {
    const int i = members[static_cast<std::size_t>(j)];
    s.labels.push_back(b.labels[static_cast<std::size_t>(i)]);
    for (int t = 0; t < s.T; ++t) {
      s.ids[static_cast<std::size_t>(t * B + j)] = b.ids[static_cast<std::size_t>(t * kBatch + i)];
      s.tags[static_cast<std::size_t>(t * B + j)] = b.tags[static_cast<std::size_t>(t * kBatch + i)];
    }
  }
  for (int len : s.lengths) s.tokens += len;
  return s;
}

struct Workload {
  const char* name;
  gyre::nn::CellType cell;
  int hidden;
  bool bidirectional;  // with a per-token head (tagger); else last-state classifier
};

constexpr Workload kWorkloads[] = {
    {"lstm-64", gyre::nn::CellType::kLstm, 64, false},   {"lstm-256", gyre::nn::CellType::kLstm, 256, false},
    {"lstm-512", gyre::nn::CellType::kLstm, 512, false}, {"gru-64", gyre::nn::CellType::kGru, 64, false},
    {"gru-256", gyre::nn::CellType::kGru, 256, false},   {"gru-512", gyre::nn::CellType::kGru, 512, false},
    {"bilstm-128-tagger", gyre::nn::CellType::kLstm, 128, true},
};

double flops_per_token(const Workload& w) {
  const double gates = w.cell == gyre::nn::CellType::kLstm ? 4.0 : 3.0;
  const double dirs = w.bidirectional ? 2.0 : 1.0;
  return 3.0 * 2.0 * gates * w.hidden * (kEmbed + w.hidden) * dirs;  // forward + backward (~2x)
}

// One model replica with its own parameters, gradients and workspaces.
class Replica {
 public:
  explicit Replica(const Workload& w)
      : bidirectional_(w.bidirectional),
        embedding_(store_, kVocab, kEmbed),
        stack_({w.cell, kEmbed, w.hidden, 1, w.bidirectional, 0.0f}, store_),
        head_(store_, stack_.output_size(), w.bidirectional ? kTags : kClasses),
        pooling_(gyre::nn::PoolingKind::kLast, 1) {
    gyre::Rng rng(kSeed);  // same seed: every replica starts with the same weights
    embedding_.init_parameters(rng);
    stack_.init_parameters(rng);
    head_.init_parameters(rng);
  }

  gyre::nn::ParameterStore& store() { return store_; }

  double train_step(const Batch& b) {
    store_.zero_grad();
    embedding_.forward(b.ids, x_);
    stack_.forward(x_, b.T, b.lengths, seq_, true, nullptr);
    double loss = 0.0;
    if (bidirectional_) {
      head_.forward(seq_, logits_);
      loss = gyre::nn::token_cross_entropy(logits_, b.tags, b.T, b.lengths, d_logits_);
      head_.backward(d_logits_, &d_seq_);
    } else {
      pooling_.forward(seq_, b.T, b.lengths, pooled_);
      head_.forward(pooled_, logits_);
      loss = gyre::nn::softmax_cross_entropy(logits_, b.labels, d_logits_);
      head_.backward(d_logits_, &d_pooled_);
      pooling_.backward(d_pooled_, d_seq_);
    }
    stack_.backward(d_seq_, d_x_);
    embedding_.backward(d_x_);
    return loss;
  }

 private:
  bool bidirectional_;
  gyre::nn::ParameterStore store_;
  gyre::nn::Embedding embedding_;
  gyre::nn::RnnStack stack_;
  gyre::nn::Linear head_;
  gyre::nn::Pooling pooling_;
  Matrix x_, seq_, pooled_, logits_, d_logits_, d_pooled_, d_seq_, d_x_;
};

// Adds `from`'s gradients into `into` (dense; touched rows for sparse parameters).
void reduce_grads(gyre::nn::ParameterStore& into, gyre::nn::ParameterStore& from) {
  for (std::size_t i = 0; i < into.size(); ++i) {
    gyre::nn::Parameter& dst = into[i];
    gyre::nn::Parameter& src = from[i];
    if (!src.sparse_rows) {
      dst.grad += src.grad;
      continue;
    }
    src.finalize_touched_rows();
    for (const std::int32_t row : src.touched_rows) dst.grad.row(row) += src.grad.row(row);
    dst.touched_rows.insert(dst.touched_rows.end(), src.touched_rows.begin(), src.touched_rows.end());
    dst.finalize_touched_rows();
  }
}

double cpu_seconds() {
  timespec ts{};
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + 1e-9 * static_cast<double>(ts.tv_nsec);
}

double wall_seconds() {
  return std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch()).count();
}

struct Measure {
  double wall_tps = 0.0;
  double cpu_tps = 0.0;
};

Measure run_workload(const Workload& w, const std::vector<Batch>& batches, int threads, double seconds) {
  std::vector<std::unique_ptr<Replica>> replicas;
  for (int r = 0; r < threads; ++r) replicas.push_back(std::make_unique<Replica>(w));
  // Per-replica slices of every batch, built before timing.
  std::vector<std::vector<Batch>> parts(static_cast<std::size_t>(threads));
  for (int r = 0; r < threads; ++r)
    for (const Batch& b : batches) parts[static_cast<std::size_t>(r)].push_back(threads == 1 ? b : slice(b, r, threads));

  // Worker threads 1..threads-1 run their replica when the start barrier opens.
  std::size_t current = 0;
  bool stop = false;
  std::barrier start(threads), done(threads);
  std::vector<std::jthread> workers;
  for (int r = 1; r < threads; ++r)
    workers.emplace_back([&, r] {
      for (;;) {
        start.arrive_and_wait();
        if (stop) return;
        replicas[static_cast<std::size_t>(r)]->train_step(parts[static_cast<std::size_t>(r)][current]);
        done.arrive_and_wait();
      }
    });
  const auto step = [&](std::size_t n) {
    current = n % batches.size();
    if (threads > 1) start.arrive_and_wait();
    replicas[0]->train_step(parts[0][current]);
    if (threads > 1) {
      done.arrive_and_wait();
      for (int r = 1; r < threads; ++r) reduce_grads(replicas[0]->store(), replicas[static_cast<std::size_t>(r)]->store());
    }
    return batches[current].tokens;
  };

  for (std::size_t i = 0; i < 2; ++i) step(i);  // warm-up: sizes the workspaces
  Measure best;
  const int repeats = 3;
  std::size_t n = 0;
  for (int rep = 0; rep < repeats; ++rep) {
    long tokens = 0;
    const double wall0 = wall_seconds(), cpu0 = cpu_seconds();
    int batches_done = 0;
    double wall = 0.0;
    do {
      tokens += step(n++);
      ++batches_done;
      wall = wall_seconds() - wall0;
    } while (wall < seconds / repeats || batches_done < 2);
    const double cpu = cpu_seconds() - cpu0;
    best.wall_tps = std::max(best.wall_tps, static_cast<double>(tokens) / wall);
    // CPU time of all threads: for one thread it is immune to time-slicing by other processes.
    best.cpu_tps = std::max(best.cpu_tps, static_cast<double>(tokens) / cpu * threads);
  }
  if (threads > 1) {
    stop = true;
    start.arrive_and_wait();
  }
  return best;
}

[[noreturn]] void usage(const char* why) {
  std::fprintf(stderr, "bench_rnn: %s\nusage: bench_rnn [--threads 1|2] [--seconds S] [--workloads a,b,...]\n", why);
  std::exit(2);
}

}  // namespace

int main(int argc, char** argv) {
  int threads = 1;
  double seconds = 3.0;
  std::string wanted;
  for (int i = 1; i < argc; ++i) {
    const std::string arg = argv[i];
    if (i + 1 >= argc) usage(("missing value after " + arg).c_str());
    const std::string value = argv[++i];
    if (arg == "--threads") {
      threads = std::atoi(value.c_str());
      if (threads < 1 || threads > 2) usage("--threads must be 1 or 2");
    } else if (arg == "--seconds") {
      seconds = std::atof(value.c_str());
      if (!(seconds > 0.0)) usage("--seconds must be > 0");
    } else if (arg == "--workloads") {
      wanted = "," + value + ",";
    } else {
      usage(("unknown option " + arg).c_str());
    }
  }
  const std::vector<Batch> batches = make_batches();
  for (const Workload& w : kWorkloads) {
    if (!wanted.empty() && wanted.find("," + std::string(w.name) + ",") == std::string::npos) continue;
    const Measure m = run_workload(w, batches, threads, seconds);
    std::printf(
        "{\"side\": \"gyre\", \"workload\": \"%s\", \"threads\": %d, \"tokens_per_s\": %.1f, \"tokens_per_cpu_s\": %.1f, "
        "\"gflops\": %.3f}\n",
        w.name, threads, m.wall_tps, m.cpu_tps, m.wall_tps * flops_per_token(w) / 1e9);
    std::fflush(stdout);
  }
  return 0;
}
