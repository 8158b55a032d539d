#pragma once
// Reading input files (TOML) into system specifications. Every key is documented in
// docs/input.md; unknown keys are errors that name file, line and the nearest valid key.
//
// The reader validates everything it can without solving anything: key names and types,
// element symbols and configurations, electron counts, functional names (through libxc),
// grid resolution against Z or the softening lengths, nuclei inside the box, potential
// tables. Every InputError it throws carries the file, the line and column of the offending
// value (or of the table that lacks a required key) and the dotted key path.
#include <string>
#include <vector>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/ks/system.hpp"

namespace stillpoint {

struct SolveInput {
  std::string file;
  std::vector<SystemSpec> systems;
  /// Where each system's [[system]] table starts (same order as `systems`; key "system[i]").
  /// Used to place errors found later, for example while discretizing a system.
  std::vector<SourceLocation> system_locations;
  ScfOptions scf;
  double density_threshold = 1e-30;
};

/// Parses a `solve` input file. Throws InputError (file:line:column: key: message).
SolveInput read_solve_input(const std::string& path);
/// Same, from text (for tests); `name` is used in messages and to resolve relative paths.
SolveInput parse_solve_input(const std::string& text, const std::string& name);

}  // namespace stillpoint
