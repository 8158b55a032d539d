// Exchange enhancement as a power series F = sum_i c_i u^i in the bounded variable
// u = gamma s^2 / (1 + gamma s^2), gamma = mu_PBE / kappa_PBE, so that (c0, c1) = (1, 0.804)
// is exactly PBE exchange. Any number of coefficients.
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {
namespace {
class SeriesX final : public ModelFamily {
 public:
  std::string name() const override { return "series_x"; }
  bool needs_gradient() const override { return true; }
  std::vector<std::string> parameter_names() const override { return {"..."}; }
  std::vector<double> default_parameters() const override { return {1.0, 0.804, 0.0, 0.0}; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet&, const Jet& sdd, const std::vector<Jet>& c,
             const XcSettings&) const override {
    static const double gamma = 0.2195149727645171 / 0.804;
    return models::spin_scaled(nu, nd, suu, sdd, [&](const Jet& n, const Jet& sigma) {
      const Jet g = gamma * models::reduced_gradient_squared(n, sigma);
      const Jet u = g / (1.0 + g);
      Jet F = n.constant(0.0), power = n.constant(1.0);
      for (const Jet& ci : c) {
        F = F + ci * power;
        power = power * u;
      }
      return models::dirac_exchange(n) * F;
    });
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_series_x_model() { return std::make_unique<SeriesX>(); }
}  // namespace stillpoint
