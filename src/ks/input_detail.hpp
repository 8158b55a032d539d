#pragma once
// Internal: the [[system]] / [scf] reader of `solve`, which the readers of the other jobs
// (exact, grad, fit, invert) reuse so that a system is read the same way in every file.
#include <toml++/toml.h>

#include <string>
#include <vector>

#include "common/toml_input.hpp"
#include "stillpoint/ks/input.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint::detail {

/// Reads [[system]] and [scf] from an already parsed file; `extra_keys` are further
/// top-level keys the caller handles itself; `use` says how the grids will be used, for the
/// size guard.
SolveInput parse_solve_root(const toml::table& root, const std::string& file, const std::vector<std::string>& extra_keys,
                            GridUse use = GridUse::Banded);

}  // namespace stillpoint::detail
