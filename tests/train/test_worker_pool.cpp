// The training pool's fork-join (spin-then-block hand-over): every job runs once per worker per
// call, results are visible to the caller afterwards, exceptions reach the caller, and a pool that
// slept between calls (past the spin phase) wakes up again.

#include <catch2/catch.hpp>

#include <atomic>
#include <chrono>
#include <stdexcept>
#include <thread>
#include <vector>

#include "gyre/train/worker_pool.hpp"

using gyre::train::WorkerPool;

TEST_CASE("worker pool runs every worker once per call and propagates errors", "[train][pool]") {
  for (const int workers : {1, 2, 3}) {
    INFO("workers " << workers);
    WorkerPool pool(workers);
    std::vector<long> counts(static_cast<std::size_t>(workers), 0);
    std::atomic<int> calls{0};
    for (int round = 0; round < 2000; ++round) {
      pool.run([&](int w) {
        ++counts[static_cast<std::size_t>(w)];  // plain writes: the pool orders them before return
        calls.fetch_add(1, std::memory_order_relaxed);
      });
      if (round == 1000) std::this_thread::sleep_for(std::chrono::milliseconds(20));  // workers fall asleep
    }
    for (const long c : counts) CHECK(c == 2000);
    CHECK(calls.load() == 2000 * workers);
    CHECK_THROWS_AS(pool.run([&](int w) {
      if (w == workers - 1) throw std::runtime_error("worker failed");
    }),
                    std::runtime_error);
    long sum = 0;
    pool.run([&](int w) { counts[static_cast<std::size_t>(w)] = w; });  // usable after an error
    for (const long c : counts) sum += c;
    CHECK(sum == static_cast<long>(workers) * (workers - 1) / 2);
  }
}
