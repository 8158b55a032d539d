#pragma once
// MPI for the command line (built when Open MPI is found: STILLPOINT_HAVE_MPI).
//
// A process started by mpirun (Open MPI's launcher sets OMPI_COMM_WORLD_SIZE) initializes MPI
// and shares its work over MPI_COMM_WORLD; a process started without it never touches MPI, so
// the serial program behaves exactly as it does without MPI support.
#include <memory>
#include <string>

#include "stillpoint/parallel/communicator.hpp"

namespace stillpoint {

class MpiSession {
 public:
  /// Initializes MPI (threads funnelled: only the main thread of a rank communicates) when
  /// this process was started by mpirun.
  MpiSession(int& argc, char**& argv);
  ~MpiSession();
  MpiSession(const MpiSession&) = delete;
  MpiSession& operator=(const MpiSession&) = delete;

  /// True when running under mpirun (even with one rank).
  bool active() const { return active_; }
  /// MPI_COMM_WORLD, or the serial communicator when not active.
  const Communicator& world() const;

  /// Ends the run on every rank with one exit code. Every rank calls it once, with its own
  /// code and its error message (empty if none); the returned code is the largest of all
  /// ranks', and only the lowest rank with a nonzero code prints its message (to `err`), so a
  /// failure common to all ranks appears once, as in a serial run. A rank with an error that
  /// the others do not reach within `timeout_seconds` (they wait in a collective that the
  /// failing rank left) aborts the whole job with its code instead of letting it hang.
  int finish(int code, const std::string& message, int err_fd, double timeout_seconds = 20.0);

 private:
  bool active_ = false;
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace stillpoint
