#include "stillpoint/xc/model_functional.hpp"

#include <cmath>
#include <map>
#include <mutex>

#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

std::string ModelFamily::describe_point(double nu, double nd, double suu, double sud, double sdd,
                                        const XcSettings&) const {
  std::ostringstream m;
  m.precision(17);
  m << "n_up = " << nu << ", n_down = " << nd;
  if (needs_gradient()) m << ", sigma_uu = " << suu << ", sigma_ud = " << sud << ", sigma_dd = " << sdd;
  return m.str();
}

NonFiniteModelError::NonFiniteModelError(const std::string& head, const std::string& tail, std::vector<double> rho)
    : NumericalError(head + " " + tail), head_(head), tail_(tail), rho_(std::move(rho)) {}

NonFiniteModelError NonFiniteModelError::with_position(const Mesh& mesh, const std::vector<Eigen::VectorXd>& n) const {
  for (int k = 0; k < mesh.num_nodes(); ++k) {
    bool same = n.size() == rho_.size();
    for (std::size_t s = 0; same && s < n.size(); ++s) same = std::max(n[s](k), 0.0) == rho_[s];
    if (!same) continue;
    std::ostringstream m;
    m.precision(10);
    m << head_ << " at " << (mesh.geometry() == Geometry::Radial ? "r" : "x") << " = " << mesh.x()(k) << " bohr,";
    return NonFiniteModelError(m.str(), tail_, rho_);
  }
  return *this;
}

namespace {

std::map<std::string, ModelFactory>& registry() {
  static std::map<std::string, ModelFactory> r;
  return r;
}

}  // namespace

// Built-in families (src/lib/models/*.cpp). A static library drops object files nobody
// references, so the built-ins are listed here explicitly: adding a family is one file plus
// one line in this list.
std::unique_ptr<ModelFamily> make_xalpha_model();
std::unique_ptr<ModelFamily> make_pbe_x_model();
std::unique_ptr<ModelFamily> make_b88_x_model();
std::unique_ptr<ModelFamily> make_series_x_model();
std::unique_ptr<ModelFamily> make_pw92_c_model();
std::unique_ptr<ModelFamily> make_rational_c_1d_model();
std::unique_ptr<ModelFamily> make_soft_x_1d_model();

namespace {
void register_builtins() {
  static std::once_flag once;
  std::call_once(once, [] {
    registry()["xalpha"] = make_xalpha_model;
    registry()["pbe_x"] = make_pbe_x_model;
    registry()["b88_x"] = make_b88_x_model;
    registry()["series_x"] = make_series_x_model;
    registry()["pw92_c"] = make_pw92_c_model;
    registry()["rational_c_1d"] = make_rational_c_1d_model;
    registry()["soft_x_1d"] = make_soft_x_1d_model;
  });
}

class ModelTerm final : public XcTerm {
 public:
  ModelTerm(std::shared_ptr<const ModelFamily> f, std::vector<double> params, const XcSettings& s)
      : family_(std::move(f)), params_(std::move(params)), settings_(s) {}

  std::string name() const override { return "model:" + family_->name(); }
  bool needs_gradient() const override { return family_->needs_gradient(); }
  std::vector<std::string> parameter_names() const override {
    auto names = family_->parameter_names();
    names.resize(params_.size(), "...");
    for (std::size_t i = 0; i < names.size(); ++i)
      if (names[i].empty() || names[i] == "...") names[i] = std::string("c").append(std::to_string(i));
    return names;
  }
  std::vector<double> parameters() const override { return params_; }
  std::unique_ptr<XcTerm> with_parameters(const std::vector<double>& p) const override {
    return std::make_unique<ModelTerm>(family_, p, settings_);
  }

  void accumulate(const XcPointData& in, double w, int order, XcDerivatives& out) const override {
    const bool gga = family_->needs_gradient();
    const int ns = in.nspin;
    const int nv = ns == 1 ? (gga ? 2 : 1) : (gga ? 5 : 2);
    for (std::size_t i = 0; i < in.np; ++i) {
      const Jet e = evaluate(in, i, nv, order, -1);
      const auto fin = [&](double v) { return finite(v, in, i); };
      out.e[i] += w * fin(e.value());
      if (ns == 1) {
        out.vrho[i] += w * fin(e.d(0));
        if (gga) out.vsigma[i] += w * fin(e.d(1));
        if (order >= 2) {
          out.v2rho2[i] += w * fin(e.d2(0, 0));
          if (gga) {
            out.v2rhosigma[i] += w * fin(e.d2(0, 1));
            out.v2sigma2[i] += w * fin(e.d2(1, 1));
          }
        }
      } else {
        for (int s = 0; s < 2; ++s) out.vrho[2 * i + s] += w * fin(e.d(s));
        if (gga)
          for (int a = 0; a < 3; ++a) out.vsigma[3 * i + a] += w * fin(e.d(2 + a));
        if (order >= 2) {
          out.v2rho2[3 * i] += w * fin(e.d2(0, 0));
          out.v2rho2[3 * i + 1] += w * fin(e.d2(0, 1));
          out.v2rho2[3 * i + 2] += w * fin(e.d2(1, 1));
          if (gga) {
            for (int s = 0; s < 2; ++s)
              for (int a = 0; a < 3; ++a) out.v2rhosigma[6 * i + 3 * s + a] += w * fin(e.d2(s, 2 + a));
            int k = 0;
            for (int a = 0; a < 3; ++a)
              for (int b = a; b < 3; ++b, ++k) out.v2sigma2[6 * i + k] += w * fin(e.d2(2 + a, 2 + b));
          }
        }
      }
    }
  }

  void parameter_derivatives(const XcPointData& in, int p, std::vector<double>& de, std::vector<double>& dvrho,
                             std::vector<double>& dvsigma) const override {
    const bool gga = family_->needs_gradient();
    const int ns = in.nspin;
    const int nv = ns == 1 ? (gga ? 2 : 1) : (gga ? 5 : 2);
    const int nsig = ns == 1 ? 1 : 3;
    de.assign(in.np, 0.0);
    dvrho.assign(in.np * ns, 0.0);
    dvsigma.assign(gga ? in.np * nsig : 0, 0.0);
    for (std::size_t i = 0; i < in.np; ++i) {
      const Jet e = evaluate(in, i, nv + 1, 2, p);
      const auto fin = [&](double v) { return finite(v, in, i); };
      fin(e.value());
      de[i] = fin(e.d(nv));
      for (int s = 0; s < ns; ++s) dvrho[ns * i + s] = fin(e.d2(s, nv));
      if (gga)
        for (int a = 0; a < nsig; ++a) dvsigma[nsig * i + a] = fin(e.d2(ns + a, nv));
    }
  }

 private:
  // A non-finite value above the density threshold is an error naming the term, the point
  // and its variables: dropping it would silently change the functional.
  double finite(double v, const XcPointData& in, std::size_t i) const {
    if (std::isfinite(v)) return v;
    const double total = in.nspin == 1 ? in.rho[i] : in.rho[2 * i] + in.rho[2 * i + 1];
    double nu = 0.5 * total, nd = nu, suu = 0.0, sud = 0.0, sdd = 0.0;
    if (in.nspin == 2) nu = in.rho[2 * i], nd = in.rho[2 * i + 1];
    if (family_->needs_gradient() && !in.sigma.empty()) {
      if (in.nspin == 1)
        suu = sud = sdd = 0.25 * in.sigma[i];
      else
        suu = in.sigma[3 * i], sud = in.sigma[3 * i + 1], sdd = in.sigma[3 * i + 2];
    }
    std::vector<double> rho(in.rho.begin() + static_cast<std::ptrdiff_t>(in.nspin * i),
                            in.rho.begin() + static_cast<std::ptrdiff_t>(in.nspin * (i + 1)));
    const std::string head = "xc term '" + family_->label() + "' is not finite (energy density or a derivative of it)";
    std::string tail = "where " + family_->describe_point(nu, nd, suu, sud, sdd, settings_) +
                       "; guard the expression where it is undefined, e.g. max(x, 1e-12) inside sqrt or log "
                       "(see \"Guarded formulas\" in docs/input.md)";
    throw NonFiniteModelError(head, tail, std::move(rho));
  }

  // Jets for the point's inputs (and parameter `active` as the last variable when >= 0).
  // Gradient models are screened below a total density of 1e-12 (libxc's PBE correlation
  // default) and spin densities below kSpinFloor of the total are passed as zero: there GGA
  // kernels grow like n^-4 and spin-interpolated correlation kernels like (1 - zeta)^(-2/3),
  // which only adds rounding noise to response solves while the energy they carry is below
  // 1e-12 hartree.
  static constexpr double kSpinFloor = 1e-14;
  Jet evaluate(const XcPointData& in, std::size_t i, int nv, int order, int active) const {
    const bool gga = family_->needs_gradient();
    const double total = in.nspin == 1 ? in.rho[i] : in.rho[2 * i] + in.rho[2 * i + 1];
    if (gga && total < 1e-12) return Jet(0.0, nv, order);
    std::vector<Jet> par(params_.size());
    for (std::size_t k = 0; k < params_.size(); ++k)
      par[k] = static_cast<int>(k) == active ? Jet::variable(params_[k], nv - 1, nv, order) : Jet(params_[k], nv, order);
    if (in.nspin == 1) {
      const Jet n = Jet::variable(in.rho[i], 0, nv, order);
      const Jet half = 0.5 * n;
      Jet s(0.0, nv, order);
      if (gga) s = 0.25 * Jet::variable(in.sigma[i], 1, nv, order);
      return family_->energy(half, half, s, s, s, par, settings_);
    }
    const bool zero_up = in.rho[2 * i] < kSpinFloor * total, zero_dn = in.rho[2 * i + 1] < kSpinFloor * total;
    const Jet nu = zero_up ? Jet(0.0, nv, order) : Jet::variable(in.rho[2 * i], 0, nv, order);
    const Jet nd = zero_dn ? Jet(0.0, nv, order) : Jet::variable(in.rho[2 * i + 1], 1, nv, order);
    Jet suu(0.0, nv, order), sud = suu, sdd = suu;
    if (gga) {
      if (!zero_up) suu = Jet::variable(in.sigma[3 * i], 2, nv, order);
      if (!zero_up && !zero_dn) sud = Jet::variable(in.sigma[3 * i + 1], 3, nv, order);
      if (!zero_dn) sdd = Jet::variable(in.sigma[3 * i + 2], 4, nv, order);
    }
    return family_->energy(nu, nd, suu, sud, sdd, par, settings_);
  }

  std::shared_ptr<const ModelFamily> family_;
  std::vector<double> params_;
  XcSettings settings_;
};

}  // namespace

bool register_model_family(const std::string& name, ModelFactory factory) {
  register_builtins();
  registry()[name] = std::move(factory);
  return true;
}

std::vector<std::string> model_family_names() {
  register_builtins();
  std::vector<std::string> names;
  for (const auto& [k, v] : registry()) names.push_back(k);
  return names;
}

std::unique_ptr<XcTerm> make_model_term(std::shared_ptr<const ModelFamily> family, const std::vector<double>& params,
                                        const XcSettings& settings) {
  if (family->one_dimensional() && !settings.one_dimensional)
    throw InputError("model '" + family->name() + "' is a 1D functional; it cannot be used for a radial atom");
  std::vector<double> p = params.empty() ? family->default_parameters() : params;
  const auto names = family->parameter_names();
  if (!names.empty() && names.back() != "..." && p.size() != names.size())
    throw InputError("model '" + family->name() + "' takes " + std::to_string(names.size()) + " parameters, got " +
                     std::to_string(p.size()));
  if (p.size() + 5 >= static_cast<std::size_t>(Jet::kMaxVars) + 100) throw InputError("too many model parameters");
  return std::make_unique<ModelTerm>(std::move(family), std::move(p), settings);
}

std::unique_ptr<XcTerm> make_model_term(const std::string& name, const std::vector<double>& params,
                                        const XcSettings& settings) {
  register_builtins();
  const auto it = registry().find(name);
  if (it == registry().end()) {
    const std::string near = nearest_word(name, model_family_names());
    throw InputError("unknown model family '" + name + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
  }
  return make_model_term(std::shared_ptr<const ModelFamily>(it->second()), params, settings);
}

}  // namespace stillpoint
