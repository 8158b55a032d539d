#pragma once
// Independent SCFs shared out over the ranks of a run.
#include <exception>
#include <functional>
#include <vector>

#include "stillpoint/ks/scf.hpp"
#include "stillpoint/parallel/communicator.hpp"

namespace stillpoint {

/// Solves every problem; each is solved by one rank and every rank receives every solution,
/// bit for bit (the same as a serial run). `started(i)` is called on the solving rank as
/// problem i starts; `finished(i, solution)` on every rank, in input order, for each problem
/// solved before the first failure (with one rank: as soon as it is solved, so a long batch
/// reports as it goes). Like a serial loop it stops at the first problem that fails, in input
/// order: `on_error(i, error)` may throw it again in its own words; otherwise it is rethrown.
std::vector<KsSolution> solve_systems(const std::vector<KsProblem>& problems, const ScfOptions& options,
                                      const Communicator& ranks = serial_communicator(),
                                      const std::function<void(int)>& started = {},
                                      const std::function<void(int, const std::exception_ptr&)>& on_error = {},
                                      const std::function<void(int, const KsSolution&)>& finished = {});

}  // namespace stillpoint
