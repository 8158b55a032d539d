// Placeholder until the fit subcommand lands; replaced by its implementation.
#include <iostream>

#include "commands.hpp"

int run_fit(const FitCommandOptions&) {
  std::cerr << "stillpoint: 'fit' is not available in this build\n";
  return 2;
}
