#include "gyre/train/worker_pool.hpp"

#include <chrono>
#include <thread>

#include "gyre/core/error.hpp"

#if defined(__x86_64__) || defined(__i386__)
#include <immintrin.h>
#endif

namespace gyre::train {

namespace {

inline void cpu_relax() noexcept {
#if defined(__x86_64__) || defined(__i386__)
  _mm_pause();
#elif defined(__aarch64__)
  asm volatile("yield");
#endif
}

// Waits until `value` differs from `old`: polls, polls between yields, then sleeps (see the
// header).
template <class T>
T wait_change(const std::atomic<T>& value, T old) noexcept {
  using Clock = std::chrono::steady_clock;
  const auto start = Clock::now();
  for (;;) {
    for (int i = 0; i < 64; ++i) {  // about a microsecond between clock reads
      const T now = value.load(std::memory_order_acquire);
      if (now != old) return now;
      cpu_relax();
    }
    const auto waited = Clock::now() - start;
    if (waited >= WorkerPool::kYieldTime) break;
    if (waited >= WorkerPool::kPollTime) std::this_thread::yield();
  }
  for (;;) {
    value.wait(old, std::memory_order_acquire);
    const T now = value.load(std::memory_order_acquire);
    if (now != old) return now;
  }
}

}  // namespace

WorkerPool::WorkerPool(int workers) : workers_(workers), errors_(static_cast<std::size_t>(workers)) {
  GYRE_CHECK(workers >= 1, "WorkerPool needs at least one worker");
  for (int w = 1; w < workers; ++w) threads_.emplace_back([this, w] { loop(w); });
}

WorkerPool::~WorkerPool() {
  stop_.store(true, std::memory_order_release);
  generation_.fetch_add(1, std::memory_order_acq_rel);
  generation_.notify_all();
  for (auto& t : threads_) t.join();
}

void WorkerPool::loop(int worker) {
  std::uint32_t seen = 0;
  for (;;) {
    seen = wait_change(generation_, seen);
    if (stop_.load(std::memory_order_acquire)) return;
    try {
      (*job_)(worker);
    } catch (...) {
      errors_[static_cast<std::size_t>(worker)] = std::current_exception();
    }
    if (pending_.fetch_sub(1, std::memory_order_acq_rel) == 1) pending_.notify_one();
  }
}

void WorkerPool::run_ref(JobRef job) {
  for (auto& e : errors_) e = nullptr;
  if (workers_ > 1) {
    job_ = &job;
    pending_.store(static_cast<std::uint32_t>(workers_ - 1), std::memory_order_relaxed);
    generation_.fetch_add(1, std::memory_order_release);  // publishes job_ and pending_
    generation_.notify_all();
  }
  try {
    job(0);
  } catch (...) {
    errors_[0] = std::current_exception();
  }
  if (workers_ > 1) {
    std::uint32_t left = pending_.load(std::memory_order_acquire);
    while (left != 0) left = wait_change(pending_, left);
    job_ = nullptr;
  }
  for (auto& e : errors_)
    if (e) std::rethrow_exception(e);
}

}  // namespace gyre::train
