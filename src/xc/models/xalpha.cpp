// X-alpha exchange: e = (3 alpha / 2) e_x^Dirac, spin-scaled (Slater 1951; alpha = 2/3 is Dirac).
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {
namespace {
class XAlpha final : public ModelFamily {
 public:
  std::string name() const override { return "xalpha"; }
  bool needs_gradient() const override { return false; }
  std::vector<std::string> parameter_names() const override { return {"alpha"}; }
  std::vector<double> default_parameters() const override { return {2.0 / 3.0}; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet&, const Jet& sdd, const std::vector<Jet>& p,
             const XcSettings&) const override {
    return 1.5 * p[0] * models::spin_scaled(nu, nd, suu, sdd, [](const Jet& n, const Jet&) { return models::dirac_exchange(n); });
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_xalpha_model() { return std::make_unique<XAlpha>(); }
}  // namespace stillpoint
