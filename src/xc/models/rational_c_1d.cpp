// A 1D correlation model, rational in r_s = 1/(2n):
// eps_c = -(a1 rs + a2 rs^2) / (1 + b1 rs + b2 rs^2 + b3 rs^3), spin-independent. Our own form;
// the defaults are a rough shape of the soft-Coulomb (a = 1) uniform-gas correlation, meant as
// a starting point for fits, not as a reference.
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {
namespace {
class RationalC1d final : public ModelFamily {
 public:
  std::string name() const override { return "rational_c_1d"; }
  bool needs_gradient() const override { return false; }
  bool one_dimensional() const override { return true; }
  std::vector<std::string> parameter_names() const override { return {"a1", "a2", "b1", "b2", "b3"}; }
  std::vector<double> default_parameters() const override { return {0.0306, 0.0, 0.0, 0.05, 0.0}; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet&, const Jet&, const Jet&, const std::vector<Jet>& p,
             const XcSettings&) const override {
    const Jet n = nu + nd;
    const Jet rs = 0.5 / n;
    const Jet eps = -(p[0] * rs + p[1] * rs * rs) / (1.0 + p[2] * rs + p[3] * rs * rs + p[4] * rs * rs * rs);
    return n * eps;
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_rational_c_1d_model() { return std::make_unique<RationalC1d>(); }
}  // namespace stillpoint
