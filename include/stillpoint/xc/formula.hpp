#pragma once
// User-written functionals: an energy density typed into the input file as a plain infix
// expression, parsed once into postfix code and evaluated with jets, so the potential, kernel and
// parameter derivatives are exact. Evaluation can only do arithmetic on the listed variables
// and parameters (no loops, calls out, or state): it is sandboxed by construction.
//
// Syntax: numbers (1, 0.5, 2e-3), + - * / ^ (right-associative power), unary minus,
// parentheses, functions exp log sqrt cbrt sin cos tanh atan asinh, pow(a, b), max(a, b) and
// min(a, b) (derivatives of the selected argument), the constant
// pi, the variables below, and the formula's named parameters.
// Variables: n (total density), n_up, n_down, zeta (spin polarization), rs (Wigner–Seitz
// radius: (3/(4 pi n))^(1/3) in 3D, 1/(2n) on the line), sigma (|grad n|^2), s2 and s (reduced
// gradient: s = |grad n| / (2 (3 pi^2)^(1/3) n^(4/3)) in 3D, |n'| / (pi n^2) on the line).
// Prefer s2 over s: s has an infinite derivative at zero gradient.
#include <memory>
#include <string>
#include <vector>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {

struct FormulaSpec {
  std::string name;        ///< referenced as "formula:<name>" in xc lists
  std::string expression;  ///< energy per particle (per_volume = false) or per volume
  bool per_volume = false;
  std::vector<std::string> parameter_names;
  std::vector<double> parameter_values;
  SourceLocation where;  ///< where the expression was written, for error messages
};

/// Parses the expression; InputError names the line of `where` and the column in the
/// expression for syntax errors and unknown names.
std::shared_ptr<const ModelFamily> compile_formula(const FormulaSpec& spec);

}  // namespace stillpoint
