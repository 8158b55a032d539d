#pragma once
// Subcommands implemented outside main.cpp, one file each (src/cli/<name>_command.cpp).
#include <string>
#include <vector>

#include "stillpoint/parallel/communicator.hpp"

/// The ranks of this run: MPI_COMM_WORLD under mpirun, else this process alone (set by main).
const stillpoint::Communicator& ranks();
/// Only rank 0 writes files and results; the other ranks compute their share and stay silent.
inline bool writes_files() { return ranks().rank() == 0; }

struct GradCommandOptions {
  std::string input;
  std::string output;
  std::string mode;  ///< "", "adjoint" or "tangent" (empty: from the input file)
  bool verify = false;
  double verify_tolerance = 0.0;  ///< 0: from the input file
  bool quiet = false;
};
int run_grad(const GradCommandOptions& options);

struct ExactCommandOptions {
  std::string input;
  std::string output;
  bool quiet = false;
};
int run_exact(const ExactCommandOptions& options);

struct InvertCommandOptions {
  std::string input;
  std::string output;
  bool quiet = false;
};
int run_invert(const InvertCommandOptions& options);

struct FitCommandOptions {
  std::string input;
  std::string output;
  bool resume = false;
  bool quiet = false;
  int threads = 0;  ///< 0: from the input file or hardware
};
int run_fit(const FitCommandOptions& options);

struct FunctionalsCommandOptions {
  std::string survey;  ///< empty: list the catalog; else a survey set (functional_survey.hpp)
  std::vector<std::string> only;
  std::string markdown;
  std::vector<std::string> energies_of;  ///< systems whose energies the Markdown table shows (empty: all)
  int threads = 1;
  bool quiet = false;
};
int run_functionals(const FunctionalsCommandOptions& options);
