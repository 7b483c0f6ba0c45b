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
#include <functional>
#include <thread>
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
  /// exception thrown by any job is rethrown here (after all jobs finished).
  void run(const std::function<void(int)>& job);

  /// Polling rounds before a waiting thread sleeps (about 20-50 us; tests may set 0).
  static constexpr int kSpinRounds = 4000;

 private:
  void loop(int worker);
  int workers_;
  std::vector<std::thread> threads_;
  const std::function<void(int)>* job_ = nullptr;
  std::atomic<std::uint32_t> generation_{0};  // bumped to start a job (and to stop)
  std::atomic<std::uint32_t> pending_{0};     // workers 1.. still running the current job
  std::atomic<bool> stop_{false};
  std::vector<std::exception_ptr> errors_;
};

}  // namespace gyre::train
