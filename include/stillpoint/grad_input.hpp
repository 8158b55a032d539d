#pragma once
// Reading `grad` input files: the systems (as for `solve`), [[parameter]] blocks, [[loss]]
// terms and a [grad] table. Documented key by key in docs/input.md.
#include <string>
#include <vector>

#include "stillpoint/gradient.hpp"
#include "stillpoint/input.hpp"

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
