#include "stillpoint/parallel/solve_systems.hpp"

#include "parallel/distribute.hpp"
#include "parallel/transport.hpp"

namespace stillpoint {

std::vector<KsSolution> solve_systems(const std::vector<KsProblem>& problems, const ScfOptions& options,
                                      const Communicator& ranks, const std::function<void(int)>& started,
                                      const std::function<void(int, const std::exception_ptr&)>& on_error,
                                      const std::function<void(int, const KsSolution&)>& finished) {
  const int n = static_cast<int>(problems.size());
  std::vector<KsSolution> out(problems.size());
  if (ranks.size() == 1) {
    for (int i = 0; i < n; ++i) {
      if (started) started(i);
      try {
        out[i] = solve_scf(problems[i], options);
      } catch (...) {
        if (on_error) on_error(i, std::current_exception());
        throw;
      }
      if (finished) finished(i, out[i]);
    }
    return out;
  }
  std::vector<double> cost(problems.size());
  for (int i = 0; i < n; ++i)  // until measured: states grow with the electrons, each solve with the nodes
    cost[i] = problems[i].mesh().num_nodes() * (problems[i].electron_count() + 1.0);
  const auto errors = detail::distributed_for(
      ranks, n, 1, cost,
      [&](int i) {
        if (started) started(i);
        out[i] = solve_scf(problems[i], options);
      },
      [&](int i) { return detail::pack_solution(out[i]); },
      [&](int i, const std::string& bytes) { out[i] = detail::unpack_solution(bytes); },
      /*stop_at_first_error=*/true);
  for (int i = 0; i < n; ++i) {
    if (errors[i]) {
      if (on_error) on_error(i, errors[i]);
      std::rethrow_exception(errors[i]);
    }
    if (finished) finished(i, out[i]);
  }
  return out;
}

}  // namespace stillpoint
