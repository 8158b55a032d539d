#pragma once
// Reading `fit` workflow files: a `grad` input (systems, [[parameter]], [[loss]]) plus the
// fit's own keys: [fit] (optimizer, stopping, threads, sets), per-parameter start values,
// bounds, priors, smoothness and published values, per-term set and normalization scale, and
// [[dataset]] folders written by `stillpoint exact`. Documented key by key in docs/fit.md.
#include <string>
#include <vector>

#include "stillpoint/fit/fit.hpp"
#include "stillpoint/ks/input.hpp"

namespace stillpoint {

struct FitWorkflow {
  std::string file;
  /// The systems with every start value applied, [scf] and the formulas: what the fitted-model
  /// file is written from.
  SolveInput base;
  FitSpec spec;
  /// Write plots when gnuplot is available ([fit] plots).
  bool plots = true;
  std::vector<std::string> warnings;
};

FitWorkflow read_fit_workflow(const std::string& path);
FitWorkflow parse_fit_workflow(const std::string& text, const std::string& name);

}  // namespace stillpoint
