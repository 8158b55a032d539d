// Becke 1988 exchange, per spin: e = e_x^LDA,s - beta n_s^(4/3) x^2 / (1 + 6 beta x asinh x),
// x = |grad n_s| / n_s^(4/3) (A. D. Becke, PRA 38, 3098 (1988)); beta free.
#include "common.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {
namespace {

// h(t) = sqrt(t) asinh(sqrt(t)) as a smooth function of t = x^2 (no sqrt singularity at t = 0).
Jet x_asinh_x(const Jet& t) {
  const double v = t.value();
  if (v < 1e-6) {  // asinh x = x - x^3/6 + 3x^5/40 - ...: h = t - t^2/6 + 3 t^3/40 + O(t^4)
    return t.apply(v - v * v / 6.0 + 3.0 * v * v * v / 40.0, 1.0 - v / 3.0 + 9.0 * v * v / 40.0, -1.0 / 3.0 + 9.0 * v / 20.0);
  }
  const double x = std::sqrt(v), a = std::asinh(x), r = std::sqrt(1.0 + v);
  const double h = x * a;
  const double dh = a / (2.0 * x) + 1.0 / (2.0 * r);
  const double d2h = -a / (4.0 * x * v) + 1.0 / (4.0 * v * r) - 1.0 / (4.0 * r * r * r);
  return t.apply(h, dh, d2h);
}

class B88X final : public ModelFamily {
 public:
  std::string name() const override { return "b88_x"; }
  bool needs_gradient() const override { return true; }
  std::vector<std::string> parameter_names() const override { return {"beta"}; }
  std::vector<double> default_parameters() const override { return {0.0042}; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet&, const Jet& sdd, const std::vector<Jet>& p,
             const XcSettings&) const override {
    const Jet& beta = p[0];
    static const double cx = -1.5 * std::cbrt(3.0 / (4.0 * std::numbers::pi));
    Jet e = nu.constant(0.0);
    for (int s = 0; s < 2; ++s) {
      const Jet& n = s == 0 ? nu : nd;
      const Jet& sig = s == 0 ? suu : sdd;
      if (n.value() <= 0.0) continue;
      const Jet n43 = pow(n, 4.0 / 3.0);
      const Jet t = sig / (n43 * n43);  // x^2
      e = e + cx * n43 - beta * n43 * t / (1.0 + 6.0 * beta * x_asinh_x(t));
    }
    return e;
  }
};
}  // namespace
std::unique_ptr<ModelFamily> make_b88_x_model() { return std::make_unique<B88X>(); }
}  // namespace stillpoint
