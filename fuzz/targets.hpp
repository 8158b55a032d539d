#pragma once
// Fuzz targets: every reader that takes bytes from a user. Each target feeds the bytes to one
// reader and accepts only the documented outcomes: a value, or one of stillpoint's own errors
// (InputError, NumericalError, OutputError). Anything else escaping (a standard-library
// exception, a crash, a sanitizer report, a hang) is a finding. The same targets run under
// libFuzzer (libfuzzer_entry.cpp, STILLPOINT_FUZZ=ON with clang) and under the ordinary test
// suite, which replays the seed corpus and every past finding (replay.cpp).
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace stillpoint::fuzz {

using TargetFn = void (*)(const std::uint8_t* data, std::size_t size);

struct Target {
  const char* name;
  TargetFn run;
};

/// Every target, by name: solve_input, grad_input, fit_input, exact_input, invert_input,
/// formula, reference_table, potential_table, target_density, checkpoint.
const std::vector<Target>& targets();
const Target* find_target(const std::string& name);

/// Runs one input through a target. Returns normally for accepted outcomes and aborts with a
/// message naming the target for anything else, so libFuzzer records the input.
void run_one(const Target& target, const std::uint8_t* data, std::size_t size);

/// A small valid checkpoint file, the seed of the checkpoint target.
std::string checkpoint_seed();

}  // namespace stillpoint::fuzz
