#pragma once
// Internal: [[dataset]] blocks of fit workflows. A dataset is a reference folder written by
// `stillpoint exact` (manifest.toml plus density files, docs/exact.md); every entry becomes a
// [[system]] (its stored system table with the dataset's functional) and [[loss]] terms
// (total energy, density, HOMO) against the exact data. The expansion is done on the parsed
// TOML, so the dataset systems are read, checked and referred to exactly like written ones.
#include <toml++/toml.h>

#include <string>

namespace stillpoint::detail {

/// Expands every [[dataset]] of `root` in place into further [[system]] and [[loss]] tables
/// (the [[dataset]] key itself stays for the caller's key check; the nodes already there keep
/// their source lines). InputError naming the workflow file and key, or the manifest.
void expand_datasets(toml::table& root, const std::string& file);

}  // namespace stillpoint::detail
