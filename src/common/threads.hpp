#pragma once
// Internal: a parallel loop over independent work items (systems) with std::thread.
//
// Items are handed out dynamically, but each item is computed entirely by one thread from
// inputs that do not depend on the schedule, and every caller reduces the per-item results
// in item order afterwards, so results are identical whatever the thread count. An exception
// thrown by an item is captured and returned for that item; the other items still run.
#include <algorithm>
#include <atomic>
#include <exception>
#include <thread>
#include <vector>

namespace stillpoint::detail {

template <class F>
std::vector<std::exception_ptr> parallel_for(int count, int threads, F&& body) {
  std::vector<std::exception_ptr> errors(static_cast<std::size_t>(std::max(count, 0)));
  if (count <= 0) return errors;
  std::atomic<int> next{0};
  auto worker = [&] {
    for (int i = next++; i < count; i = next++) {
      try {
        body(i);
      } catch (...) {
        errors[static_cast<std::size_t>(i)] = std::current_exception();
      }
    }
  };
  const int n = std::clamp(threads, 1, count);
  if (n == 1) {
    worker();
    return errors;
  }
  std::vector<std::thread> pool;
  pool.reserve(static_cast<std::size_t>(n - 1));
  for (int t = 1; t < n; ++t) pool.emplace_back(worker);
  worker();
  for (auto& th : pool) th.join();
  return errors;
}

}  // namespace stillpoint::detail
