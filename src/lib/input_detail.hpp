#pragma once
// Internal: lets other input readers (grad, later fit) share the [[system]] / [scf] reader.
#include <toml++/toml.h>

#include <string>
#include <vector>

#include "stillpoint/input.hpp"

namespace stillpoint::detail {

/// Reads [[system]] and [scf] from an already parsed file; `extra_keys` are further
/// top-level keys the caller handles itself.
SolveInput parse_solve_root(const toml::table& root, const std::string& file, const std::vector<std::string>& extra_keys);

/// file:line:column of a node.
SourceLocation location(const std::string& file, const toml::node& node, const std::string& key);

}  // namespace stillpoint::detail
