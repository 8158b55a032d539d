#pragma once
// Reading input files (TOML) into system specifications. Every key is documented in
// docs/input.md; unknown keys are errors that name file, line and the nearest valid key.
#include <string>
#include <vector>

#include "stillpoint/scf.hpp"
#include "stillpoint/system.hpp"

namespace stillpoint {

struct SolveInput {
  std::string file;
  std::vector<SystemSpec> systems;
  ScfOptions scf;
  double density_threshold = 1e-30;
};

/// Parses a `solve` input file. Throws InputError (file:line:column: key: message).
SolveInput read_solve_input(const std::string& path);
/// Same, from text (for tests); `name` is used in messages and to resolve relative paths.
SolveInput parse_solve_input(const std::string& text, const std::string& name);

}  // namespace stillpoint
