#pragma once
// Subcommands implemented outside main.cpp.
#include <string>

struct GradCommandOptions {
  std::string input;
  std::string output;
  std::string mode;  ///< "", "adjoint" or "tangent" (empty: from the input file)
  bool verify = false;
  double verify_tolerance = 0.0;  ///< 0: from the input file
  bool quiet = false;
};

int run_grad(const GradCommandOptions& options);
