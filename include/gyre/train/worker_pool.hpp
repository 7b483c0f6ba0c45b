#pragma once
// A fixed set of threads that run one job per worker index and wait for all of them: the
// fork-join steps of data-parallel training. Worker 0 runs on the calling thread. Threads are
// started once and reused for every step (no thread creation per batch).
//
// Hand-over is poll, yield, then block: a waiting thread polls an atomic counter with the CPU's
// pause hint for kPollTime, then keeps polling between yields of its core until kYieldTime, then
// sleeps on it (C++20 atomic wait, a futex on Linux). A training step hands over work three times
// within a few milliseconds, and the worker that finished its share of the forward and backward
// first waits for the slowest one for up to about a millisecond: polling that long lets it see the
// next job within a microsecond, where a futex wake-up costs tens of microseconds on a virtual
// machine (issue 13: with 50 us of polling alone, a 2-thread epoch slept about once per step).
// The yields give the core to other runnable work meanwhile, and the sleep keeps a pool that
// waits between epochs from burning a core.

#include <atomic>
#include <chrono>
#include <cstdint>
#include <exception>
#include <memory>
#include <thread>
#include <type_traits>
#include <vector>

namespace gyre::train {

class WorkerPool {
 public:
  explicit WorkerPool(int workers);
  ~WorkerPool();
  WorkerPool(const WorkerPool&) = delete;
  WorkerPool& operator=(const WorkerPool&) = delete;

  int size() const noexcept { return workers_; }
  /// Calls job(w) for w = 0 .. size()-1 concurrently; returns when all are done. The first
  /// exception thrown by any job is rethrown here (after all jobs finished). The job is called
  /// through a reference, never copied: a lambda with any captures costs no allocation (a
  /// std::function made of it would allocate once it captures more than two pointers, i.e. once
  /// per fork-join of every training step).
  template <class Job>
  void run(Job&& job) {
    using F = std::remove_reference_t<Job>;
    run_ref(JobRef{const_cast<void*>(static_cast<const void*>(std::addressof(job))),
                   [](void* f, int w) { (*static_cast<F*>(f))(w); }});
  }

  /// How long a waiting thread polls before it starts yielding, and before it sleeps (common
  /// practice for spin-then-block hand-over, no source; the 2 ms cover the imbalance between two
  /// workers' halves of a batch measured at hidden 256, batch 32).
  static constexpr std::chrono::microseconds kPollTime{50};
  static constexpr std::chrono::microseconds kYieldTime{2000};

 private:
  struct JobRef {
    void* object;
    void (*call)(void* object, int worker);
    void operator()(int worker) const { call(object, worker); }
  };
  void run_ref(JobRef job);
  void loop(int worker);
  int workers_;
  std::vector<std::thread> threads_;
  const JobRef* job_ = nullptr;
  std::atomic<std::uint32_t> generation_{0};  // bumped to start a job (and to stop)
  std::atomic<std::uint32_t> pending_{0};     // workers 1.. still running the current job
  std::atomic<bool> stop_{false};
  std::vector<std::exception_ptr> errors_;
};

}  // namespace gyre::train
