#include "stillpoint/ks/xc_terms.hpp"

#include <xc.h>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace stillpoint {

namespace {

std::string lower(std::string s) {
  std::transform(s.begin(), s.end(), s.begin(), [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  return s;
}

bool has_token(const std::string& name, const std::string& token) {
  std::istringstream in(name);
  std::string part;
  while (std::getline(in, part, '_'))
    if (part == token) return true;
  return false;
}

std::string kind_of(const std::string& term_name) {
  const std::string name = lower(term_name);
  if (name.rfind("formula:", 0) == 0 || name.rfind("callback:", 0) == 0) return "unclassified";
  if (name.rfind("model:", 0) != 0) {
    // libxc knows what each of its functionals is.
    const int id = xc_functional_get_number(name.c_str());
    if (id > 0) {
      xc_func_type f;
      if (xc_func_init(&f, id, XC_UNPOLARIZED) == 0) {
        const int kind = f.info->kind;
        xc_func_end(&f);
        if (kind == XC_EXCHANGE) return "exchange";
        if (kind == XC_CORRELATION) return "correlation";
        if (kind == XC_EXCHANGE_CORRELATION) return "exchange-correlation";
      }
    }
  }
  // Our own terms say what they are in their names (pbe_x, pw92_c, rational_c_1d, xalpha).
  const std::string bare = name.rfind("model:", 0) == 0 ? name.substr(6) : name;
  if (has_token(bare, "xc")) return "exchange-correlation";
  if (has_token(bare, "x") || bare == "xalpha") return "exchange";
  if (has_token(bare, "c")) return "correlation";
  return "unclassified";
}

}  // namespace

std::vector<XcTermEnergy> xc_term_energies(const KsProblem& P, const std::vector<Eigen::VectorXd>& density) {
  const XcFunctional& xc = P.xc();
  std::vector<XcTermEnergy> out;
  for (std::size_t i = 0; i < xc.size(); ++i) {
    // The same functional with every other weight set to zero: the term is evaluated exactly
    // as in the SCF (same settings, thresholds and parameters).
    XcFunctional one = xc;
    for (std::size_t j = 0; j < xc.size(); ++j)
      if (j != i) one.set_weight(j, 0.0);
    XcTermEnergy e;
    e.name = xc.term(i).name();
    e.weight = xc.weight(i);
    e.kind = kind_of(e.name);
    e.energy = xc_energy(P.mesh(), one, density, P.density_threshold());
    if (!std::isfinite(e.energy))
      throw NumericalError("the energy of exchange-correlation term " + std::to_string(i) + " ('" + e.name +
                           "') on the converged density is not finite");
    out.push_back(e);
  }
  return out;
}

std::string xc_list_form(const XcFunctional& xc) {
  std::ostringstream s;
  s << "[";
  for (std::size_t i = 0; i < xc.size(); ++i) {
    if (i) s << ", ";
    s << "\"";
    if (xc.weight(i) != 1.0) s << xc.weight(i) << "*";
    s << xc.term(i).name() << "\"";
  }
  s << "]";
  return s.str();
}

}  // namespace stillpoint
