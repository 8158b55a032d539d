// PBE-form exchange enhancement F(s) = 1 + kappa - kappa / (1 + mu s^2 / kappa)
// (Perdew, Burke, Ernzerhof, PRL 77, 3865 (1996)); kappa and mu free.
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {
namespace {
class PbeX final : public ModelFamily {
 public:
  std::string name() const override { return "pbe_x"; }
  bool needs_gradient() const override { return true; }
  std::vector<std::string> parameter_names() const override { return {"kappa", "mu"}; }
  std::vector<double> default_parameters() const override { return {0.804, 0.2195149727645171}; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet&, const Jet& sdd, const std::vector<Jet>& p,
             const XcSettings&) const override {
    const Jet& kappa = p[0];
    const Jet& mu = p[1];
    return models::spin_scaled(nu, nd, suu, sdd, [&](const Jet& n, const Jet& sigma) {
      const Jet s2 = models::reduced_gradient_squared(n, sigma);
      const Jet F = 1.0 + kappa - kappa / (1.0 + mu * s2 / kappa);
      return models::dirac_exchange(n) * F;
    });
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_pbe_x_model() { return std::make_unique<PbeX>(); }
}  // namespace stillpoint
