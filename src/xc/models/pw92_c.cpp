// Perdew–Wang 1992 LDA correlation (PRB 45, 13244 (1992)) with all 18 coefficients free:
// G(rs) = -2A (1 + a1 rs) ln(1 + 1 / (2A (b1 rs^1/2 + b2 rs + b3 rs^3/2 + b4 rs^2))) for the
// paramagnetic (A0...), ferromagnetic (A1...) and spin-stiffness (Aa...) sets, combined as
// e_c = G0 - Ga f(z)(1 - z^4)/f''(0) + (G1 - G0) f(z) z^4. Defaults: the published values
// (check-values.md §5; the spin-stiffness set is from memory, as libxc's lda_c_pw uses it).
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {
namespace {
Jet G(const Jet& rs, const Jet* c) {
  const Jet srs = sqrt(rs);
  const Jet den = 2.0 * c[0] * (c[2] * srs + c[3] * rs + c[4] * rs * srs + c[5] * rs * rs);
  return -2.0 * c[0] * (1.0 + c[1] * rs) * log(1.0 + 1.0 / den);
}
class Pw92C final : public ModelFamily {
 public:
  std::string name() const override { return "pw92_c"; }
  bool needs_gradient() const override { return false; }
  std::vector<std::string> parameter_names() const override {
    return {"A0", "a1_0", "b1_0", "b2_0", "b3_0", "b4_0", "A1", "a1_1", "b1_1", "b2_1", "b3_1", "b4_1",
            "Aa", "a1_a", "b1_a", "b2_a", "b3_a", "b4_a"};
  }
  std::vector<double> default_parameters() const override {
    return {0.031091, 0.21370, 7.5957, 3.5876, 1.6382, 0.49294, 0.015545, 0.20548, 14.1189, 6.1977, 3.3662, 0.62517,
            0.016887, 0.11125, 10.357, 3.6231, 0.88026, 0.49671};
  }
  Jet energy(const Jet& nu, const Jet& nd, const Jet&, const Jet&, const Jet&, const std::vector<Jet>& p,
             const XcSettings&) const override {
    const Jet n = nu + nd;
    const Jet rs = pow(3.0 / (4.0 * std::numbers::pi) / n, 1.0 / 3.0);
    const Jet z = (nu - nd) / n;
    static const double fz20 = 1.709921;
    static const double fden = std::pow(2.0, 4.0 / 3.0) - 2.0;
    const Jet opz = 1.0 + z, omz = 1.0 - z;
    const Jet f = (pow(opz, 4.0 / 3.0) + pow(omz, 4.0 / 3.0) - 2.0) / fden;
    const Jet z4 = z * z * z * z;
    const Jet g0 = G(rs, &p[0]), g1 = G(rs, &p[6]), ga = G(rs, &p[12]);
    const Jet eps = g0 - ga * f * (1.0 - z4) / fz20 + (g1 - g0) * f * z4;
    return n * eps;
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_pw92_c_model() { return std::make_unique<Pw92C>(); }
}  // namespace stillpoint
