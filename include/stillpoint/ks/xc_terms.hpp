#pragma once
// The exchange-correlation energy of a converged density split into the terms of the
// functional: fit studies compare exchange and correlation separately.
#include <Eigen/Dense>
#include <string>
#include <vector>

#include "stillpoint/ks/problem.hpp"

namespace stillpoint {

struct XcTermEnergy {
  std::string name;     ///< the term as the input names it ("gga_x_pbe", "model:pw92_c", "formula:f")
  double weight = 1.0;  ///< its weight in the sum (included in `energy`)
  /// "exchange", "correlation", "exchange-correlation" (libxc's own kind, or the model
  /// family's name), or "unclassified" (user formulas).
  std::string kind;
  double energy = 0.0;  ///< weight × E_term[n], hartree
};

/// Every term of P.xc() evaluated on `density` (one nodal vector per spin), in the order of the
/// sum; the energies add up to the functional's E_xc[n]. Empty for a functional without terms.
/// Throws NumericalError naming the term when its energy is not finite.
std::vector<XcTermEnergy> xc_term_energies(const KsProblem& P, const std::vector<Eigen::VectorXd>& density);

/// The sum as the input's list form: ["0.75*gga_x_pbe", "lda_c_pw"] (weights shown when not 1);
/// "[]" when there is no term.
std::string xc_list_form(const XcFunctional& xc);

}  // namespace stillpoint
