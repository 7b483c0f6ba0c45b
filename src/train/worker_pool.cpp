#include "gyre/train/worker_pool.hpp"

#include "gyre/core/error.hpp"

namespace gyre::train {

WorkerPool::WorkerPool(int workers) : workers_(workers), errors_(static_cast<std::size_t>(workers)) {
  GYRE_CHECK(workers >= 1, "WorkerPool needs at least one worker");
  for (int w = 1; w < workers; ++w) threads_.emplace_back([this, w] { loop(w); });
}

WorkerPool::~WorkerPool() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  start_cv_.notify_all();
  for (auto& t : threads_) t.join();
}

void WorkerPool::loop(int worker) {
  std::uint64_t seen = 0;
  for (;;) {
    const std::function<void(int)>* job = nullptr;
    {
      std::unique_lock<std::mutex> lock(mutex_);
      start_cv_.wait(lock, [&] { return stop_ || generation_ != seen; });
      if (stop_) return;
      seen = generation_;
      job = job_;
    }
    try {
      (*job)(worker);
    } catch (...) {
      errors_[static_cast<std::size_t>(worker)] = std::current_exception();
    }
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (--pending_ == 0) done_cv_.notify_one();
    }
  }
}

void WorkerPool::run(const std::function<void(int)>& job) {
  for (auto& e : errors_) e = nullptr;
  {
    std::lock_guard<std::mutex> lock(mutex_);
    job_ = &job;
    pending_ = workers_ - 1;
    ++generation_;
  }
  start_cv_.notify_all();
  try {
    job(0);
  } catch (...) {
    errors_[0] = std::current_exception();
  }
  {
    std::unique_lock<std::mutex> lock(mutex_);
    done_cv_.wait(lock, [&] { return pending_ == 0; });
    job_ = nullptr;
  }
  for (auto& e : errors_)
    if (e) std::rethrow_exception(e);
}

}  // namespace gyre::train
