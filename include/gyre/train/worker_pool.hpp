#pragma once
// A fixed set of threads that run one job per worker index and wait for all of them: the
// fork-join step of data-parallel training. Worker 0 runs on the calling thread. Threads are
// started once and reused for every step (no thread creation per batch).

#include <condition_variable>
#include <exception>
#include <functional>
#include <mutex>
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

 private:
  void loop(int worker);
  int workers_;
  std::vector<std::thread> threads_;
  std::mutex mutex_;
  std::condition_variable start_cv_, done_cv_;
  const std::function<void(int)>* job_ = nullptr;
  std::uint64_t generation_ = 0;
  int pending_ = 0;
  bool stop_ = false;
  std::vector<std::exception_ptr> errors_;
};

}  // namespace gyre::train
