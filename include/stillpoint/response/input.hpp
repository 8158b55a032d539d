#pragma once
// Reading `grad` input files: the systems (as for `solve`), [[parameter]] blocks, [[loss]]
// terms, a [grad] table and an optional top-level initial_model = "fitted-model.toml" (start
// values from a model written by `fit`). Documented key by key in docs/grad.md and docs/fit.md.
// The `fit` workflow reader (fit_input.hpp) shares this reader and adds its own keys.
#include <string>
#include <vector>

#include "stillpoint/response/gradient.hpp"
#include "stillpoint/ks/input.hpp"

namespace stillpoint {

struct GradInput {
  SolveInput base;
  std::vector<ParameterRef> parameters;
  std::vector<LossTerm> loss;
  GradientOptions options;
  bool verify = false;
  /// Relative tolerance of --verify, with an absolute floor for near-zero components.
  double verify_tolerance = 1e-6;
  double verify_floor = 1e-8;
  /// Relative finite-difference step (times max(1, |theta|)).
  double verify_step = 1e-3;
  std::vector<std::string> warnings;
};

GradInput read_grad_input(const std::string& path);
GradInput parse_grad_input(const std::string& text, const std::string& name);

}  // namespace stillpoint
