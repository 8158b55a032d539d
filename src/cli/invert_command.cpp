// Placeholder until the invert subcommand lands; replaced by its implementation.
#include <iostream>

#include "commands.hpp"

int run_invert(const InvertCommandOptions&) {
  std::cerr << "stillpoint: 'invert' is not available in this build\n";
  return 2;
}
