#pragma once
// A fixed set of threads that run one job per worker index and wait for all of them: the
// fork-join steps of data-parallel training. Worker 0 runs on the calling thread. Threads are
// started once and reused for every step (no thread creation per batch).
//
// Hand-over is spin-then-block: a waiting thread polls an atomic counter for a short while (a
// training step hands over work several times within a few hundred microseconds, so on idle cores
// the next job is usually picked up without a system call), then sleeps on it (C++20 atomic
// wait, a futex on Linux) so that a pool waiting between epochs or behind a slow step does not
// burn a core that other work could use.

#include <atomic>
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

  /// Polling rounds before a waiting thread sleeps (about 20-50 us; tests may set 0).
  static constexpr int kSpinRounds = 4000;

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
