// Scaled exact exchange of the 1D soft-Coulomb uniform gas, alpha * e_x^soft[n] (spin-scaled),
// through the tabulated interpolant of soft_exchange_1d.hpp whose derivatives are exact for it.
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/soft_exchange_1d.hpp"

namespace stillpoint {
namespace {
class SoftX1d final : public ModelFamily {
 public:
  std::string name() const override { return "soft_x_1d"; }
  bool needs_gradient() const override { return false; }
  bool one_dimensional() const override { return true; }
  std::vector<std::string> parameter_names() const override { return {"alpha"}; }
  std::vector<double> default_parameters() const override { return {1.0}; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet&, const Jet& sdd, const std::vector<Jet>& p,
             const XcSettings& settings) const override {
    const double a = settings.softening;
    return p[0] * models::spin_scaled(nu, nd, suu, sdd, [a](const Jet& n, const Jet&) {
      const SoftExchange1dValue v = soft_exchange_1d_unpolarized(n.value(), a);
      return n.apply(v.e, v.de_dn, v.d2e_dn2);
    });
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_soft_x_1d_model() { return std::make_unique<SoftX1d>(); }
}  // namespace stillpoint
