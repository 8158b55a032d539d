#pragma once
// The processes one run is spread over (MPI ranks), as the library sees them.
//
// The library needs exactly one collective operation, an all-gather of bytes, so it depends on
// this narrow interface and not on MPI: the serial build, the Python package and every test
// that runs without mpirun use serial_communicator(). The MPI implementation lives in
// stillpoint/parallel/mpi.hpp and is built when Open MPI is found.
//
// How work is shared (see docs/mpi.md): every rank reads the same input and runs the same
// driver (optimizer, loss, reports) redundantly; only the independent items (systems, parameter
// directions, reference atoms) are computed by one rank each and their results sent to every
// rank bit for bit. Sums are always taken in item order, so every rank holds identical numbers
// and these equal a serial run's, whatever the number of ranks and the assignment.
#include <string>
#include <vector>

namespace stillpoint {

class Communicator {
 public:
  virtual ~Communicator() = default;
  virtual int rank() const = 0;
  virtual int size() const = 0;
  /// Every rank passes its bytes and receives every rank's bytes, in rank order. Collective:
  /// every rank must call it, in the same sequence.
  virtual std::vector<std::string> all_gather(const std::string& mine) const = 0;
};

/// One process: rank 0 of 1.
const Communicator& serial_communicator();

/// The owning rank of every item: longest processing time first (items by decreasing cost,
/// ties by index, each to the least loaded rank, ties to the lowest rank). Deterministic, so
/// every rank computes the same assignment from the same costs. Costs must be finite and >= 0.
std::vector<int> assign_by_cost(const std::vector<double>& cost, int ranks);

/// Parallel efficiency of that assignment: sum(cost) / (ranks * the largest rank load), in (0, 1].
double assignment_efficiency(const std::vector<double>& cost, int ranks);

}  // namespace stillpoint
