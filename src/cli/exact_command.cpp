// Placeholder until the exact subcommand lands; replaced by its implementation.
#include <iostream>

#include "commands.hpp"

int run_exact(const ExactCommandOptions&) {
  std::cerr << "stillpoint: 'exact' is not available in this build\n";
  return 2;
}
