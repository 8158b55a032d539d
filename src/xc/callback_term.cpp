#include "stillpoint/xc/callback_term.hpp"

#include <algorithm>
#include <cctype>
#include <cmath>
#include <map>
#include <mutex>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace stillpoint {

namespace {

std::mutex& registry_mutex() {
  static std::mutex m;
  return m;
}

std::map<std::string, std::shared_ptr<const XcCallback>>& registry() {
  static std::map<std::string, std::shared_ptr<const XcCallback>> r;
  return r;
}

// The same screening as model families (model_functional.cpp), so that a callback written in
// the form of a family is the same discrete functional: gradient terms vanish below a total
// density of 1e-12, and a spin density below 1e-14 of the total is exactly zero, together
// with its gradient invariants and every derivative with respect to them.
constexpr double kGradientCut = 1e-12;
constexpr double kSpinFloor = 1e-14;

// Bits of the variables a floored spin takes out: rho_up 1, rho_down 2, and for sigma
// (uu, ud, dd) the spins each involves.
constexpr int kSigmaSpins[3] = {1, 3, 2};
constexpr int kPair[6][2] = {{0, 0}, {0, 1}, {0, 2}, {1, 1}, {1, 2}, {2, 2}};

struct Prepared {
  XcPointData pts;               // the points handed to the callback
  std::vector<std::size_t> at;   // their index in the caller's point list
  std::vector<int> absent;       // floored spins per point (bits 1: up, 2: down)
};

class CallbackTerm final : public XcTerm {
 public:
  CallbackTerm(std::shared_ptr<const XcCallback> cb, std::vector<double> params, const XcSettings& s)
      : cb_(std::move(cb)), params_(std::move(params)), settings_(s) {}

  std::string name() const override { return "callback:" + cb_->name; }
  bool needs_gradient() const override { return cb_->needs_gradient; }
  std::vector<std::string> parameter_names() const override { return cb_->parameter_names; }
  std::vector<double> parameters() const override { return params_; }
  std::unique_ptr<XcTerm> with_parameters(const std::vector<double>& p) const override {
    return std::make_unique<CallbackTerm>(cb_, p, settings_);
  }

  void accumulate(const XcPointData& in, double w, int order, XcDerivatives& out) const override {
    if (in.np == 0 || w == 0.0) return;
    const Prepared prep = prepare(in);
    if (prep.pts.np == 0) return;
    XcCallbackResult r;
    call(prep, order, false, r);
    const bool gga = cb_->needs_gradient;
    const int ns = in.nspin, nsig = ns == 1 ? 1 : 3, n2 = ns == 1 ? 1 : 3, n6 = ns == 1 ? 1 : 6;
    for (std::size_t j = 0; j < prep.at.size(); ++j) {
      const std::size_t i = prep.at[j];
      const int absent = prep.absent[j];
      const auto add = [&](const char* what, const std::vector<double>& from, std::vector<double>& to, int per, int k,
                           int spins) {
        if (spins & absent) return;
        to[per * i + k] += w * finite(from[per * j + k], what, in, i);
      };
      add("energy density", r.values.e, out.e, 1, 0, 0);
      for (int s = 0; s < ns; ++s) add("vrho", r.values.vrho, out.vrho, ns, s, ns == 1 ? 0 : 1 << s);
      if (gga)
        for (int a = 0; a < nsig; ++a) add("vsigma", r.values.vsigma, out.vsigma, nsig, a, ns == 1 ? 0 : kSigmaSpins[a]);
      if (order < 2) continue;
      for (int k = 0; k < n2; ++k) add("v2rho2", r.values.v2rho2, out.v2rho2, n2, k, ns == 1 ? 0 : k == 0 ? 1 : k == 1 ? 3 : 2);
      if (!gga) continue;
      for (int k = 0; k < n6; ++k) {
        const int rs = ns == 1 ? 0 : (1 << (k / 3)) | kSigmaSpins[k % 3];
        const int ss = ns == 1 ? 0 : kSigmaSpins[kPair[k][0]] | kSigmaSpins[kPair[k][1]];
        add("v2rhosigma", r.values.v2rhosigma, out.v2rhosigma, n6, k, rs);
        add("v2sigma2", r.values.v2sigma2, out.v2sigma2, n6, k, ss);
      }
    }
  }

  // A gradient or a fit asks for one parameter at a time, at the same density, as often as
  // there are parameters (and once more for the energy): one call answers all of them.
  void parameter_derivatives(const XcPointData& in, int p, std::vector<double>& de, std::vector<double>& dvrho,
                             std::vector<double>& dvsigma) const override {
    const bool gga = cb_->needs_gradient;
    const int ns = in.nspin, nsig = ns == 1 ? 1 : 3;
    de.assign(in.np, 0.0);
    dvrho.assign(in.np * ns, 0.0);
    dvsigma.assign(gga ? in.np * nsig : 0, 0.0);
    if (p < 0 || p >= static_cast<int>(params_.size())) throw std::logic_error("callback term: no parameter " + std::to_string(p));
    const Prepared prep = prepare(in);
    if (prep.pts.np == 0) return;
    std::shared_ptr<const XcCallbackResult> r;
    {
      std::lock_guard<std::mutex> lock(cache_mutex_);
      if (cached_ && cached_pts_.nspin == prep.pts.nspin && cached_pts_.rho == prep.pts.rho &&
          cached_pts_.sigma == prep.pts.sigma)
        r = cached_;
    }
    if (!r) {
      auto fresh = std::make_shared<XcCallbackResult>();
      call(prep, 1, true, *fresh);
      std::lock_guard<std::mutex> lock(cache_mutex_);
      cached_ = fresh;
      cached_pts_ = prep.pts;
      r = fresh;
    }
    const std::size_t m = prep.pts.np;
    for (std::size_t j = 0; j < m; ++j) {
      const std::size_t i = prep.at[j];
      const int absent = prep.absent[j];
      const std::size_t base = static_cast<std::size_t>(p) * m + j;
      de[i] = finite(r->de[base], "derivative of the energy density in a parameter", in, i);
      for (int s = 0; s < ns; ++s)
        if (!(absent & (ns == 1 ? 0 : 1 << s)))
          dvrho[ns * i + s] = finite(r->dvrho[ns * base + s], "derivative of vrho in a parameter", in, i);
      if (gga)
        for (int a = 0; a < nsig; ++a)
          if (!(absent & (ns == 1 ? 0 : kSigmaSpins[a])))
            dvsigma[nsig * i + a] = finite(r->dvsigma[nsig * base + a], "derivative of vsigma in a parameter", in, i);
    }
  }

 private:
  Prepared prepare(const XcPointData& in) const {
    const bool gga = cb_->needs_gradient;
    const int ns = in.nspin, nsig = ns == 1 ? 1 : 3;
    Prepared p;
    p.pts.nspin = ns;
    for (std::size_t i = 0; i < in.np; ++i) {
      const double total = ns == 1 ? in.rho[i] : in.rho[2 * i] + in.rho[2 * i + 1];
      if (gga && total < kGradientCut) continue;
      int absent = 0;
      for (int s = 0; s < ns && ns == 2; ++s)
        if (in.rho[2 * i + s] < kSpinFloor * total) absent |= 1 << s;
      p.at.push_back(i);
      p.absent.push_back(absent);
      for (int s = 0; s < ns; ++s) p.pts.rho.push_back((absent & (1 << s)) ? 0.0 : in.rho[ns * i + s]);
      if (gga)
        for (int a = 0; a < nsig; ++a)
          p.pts.sigma.push_back(ns == 2 && (absent & kSigmaSpins[a]) ? 0.0 : in.sigma[nsig * i + a]);
    }
    p.pts.np = p.at.size();
    return p;
  }

  void call(const Prepared& prep, int order, bool parameters, XcCallbackResult& r) const {
    const bool gga = cb_->needs_gradient;
    const std::size_t np = prep.pts.np, P = params_.size();
    const int ns = prep.pts.nspin, nsig = ns == 1 ? 1 : 3;
    r.values.reset(ns, np, gga, order);
    if (parameters) {
      r.de.assign(P * np, 0.0);
      r.dvrho.assign(P * np * ns, 0.0);
      r.dvsigma.assign(gga ? P * np * nsig : 0, 0.0);
    }
    XcCallbackRequest q;
    q.points = &prep.pts;
    q.parameters = &params_;
    q.order = order;
    q.parameter_derivatives = parameters;
    q.one_dimensional = settings_.one_dimensional;
    cb_->evaluate(q, r);
    // The callback may have resized what it was given; a wrong size would read past the end.
    const auto expect = [&](const std::vector<double>& v, std::size_t n, const char* what) {
      if (v.size() != n) {
        std::ostringstream m;
        m << "xc term '" << name() << "' returned " << v.size() << " values of " << what << " for " << np
          << " points (expected " << n << "); return one value per point and component, in the libxc layout";
        throw NumericalError(m.str());
      }
    };
    expect(r.values.e, np, "the energy density");
    expect(r.values.vrho, np * ns, "vrho");
    if (gga) expect(r.values.vsigma, np * nsig, "vsigma");
    if (order >= 2) {
      expect(r.values.v2rho2, np * (ns == 1 ? 1 : 3), "v2rho2");
      if (gga) {
        expect(r.values.v2rhosigma, np * (ns == 1 ? 1 : 6), "v2rhosigma");
        expect(r.values.v2sigma2, np * (ns == 1 ? 1 : 6), "v2sigma2");
      }
    }
    if (parameters) {
      expect(r.de, P * np, "de/dtheta");
      expect(r.dvrho, P * np * ns, "dvrho/dtheta");
      if (gga) expect(r.dvsigma, P * np * nsig, "dvsigma/dtheta");
    }
  }

  // A non-finite value is an error naming the term, the quantity and the point (the mesh-aware
  // caller adds its coordinate): replacing it would silently change the functional.
  double finite(double v, const char* what, const XcPointData& in, std::size_t i) const {
    if (std::isfinite(v)) return v;
    const int ns = in.nspin;
    std::vector<double> rho(in.rho.begin() + static_cast<std::ptrdiff_t>(ns * i),
                            in.rho.begin() + static_cast<std::ptrdiff_t>(ns * (i + 1)));
    std::ostringstream m;
    m.precision(17);
    m << "where " << (ns == 1 ? "n = " : "n_up = ") << rho[0];
    if (ns == 2) m << ", n_down = " << rho[1];
    if (cb_->needs_gradient && !in.sigma.empty()) {
      const int nsig = ns == 1 ? 1 : 3;
      m << (ns == 1 ? ", sigma = " : ", sigma (uu, ud, dd) = ");
      for (int a = 0; a < nsig; ++a) m << (a ? ", " : "") << in.sigma[nsig * i + a];
    }
    const bool sigma = cb_->needs_gradient && !in.sigma.empty();
    m << " (" << (settings_.one_dimensional ? "bohr^-1" : "bohr^-3")
      << (sigma ? (settings_.one_dimensional ? ", bohr^-4" : ", bohr^-8") : "") << "); make the callable finite for every density above the density threshold, e.g. by clamping its inputs";
    throw NonFiniteModelError("xc term '" + name() + "' returned a non-finite " + what, m.str(), std::move(rho));
  }

  std::shared_ptr<const XcCallback> cb_;
  std::vector<double> params_;
  XcSettings settings_;
  mutable std::mutex cache_mutex_;
  mutable std::shared_ptr<const XcCallbackResult> cached_;
  mutable XcPointData cached_pts_;
};

bool valid_name(const std::string& n) {
  return !n.empty() && n.size() <= 100 &&
         std::all_of(n.begin(), n.end(), [](unsigned char c) { return std::isalnum(c) || c == '_'; });
}

}  // namespace

void register_xc_callback(std::shared_ptr<const XcCallback> cb) {
  if (!cb || !cb->evaluate) throw InputError("an xc callback needs a function to evaluate");
  if (!valid_name(cb->name))
    throw InputError("xc callback name '" + cb->name + "': use letters, digits and '_' (at most 100 characters)");
  if (cb->default_parameters.size() != cb->parameter_names.size())
    throw InputError("xc callback '" + cb->name + "' has " + std::to_string(cb->parameter_names.size()) +
                     " parameter names but " + std::to_string(cb->default_parameters.size()) + " values");
  for (std::size_t i = 0; i < cb->default_parameters.size(); ++i)
    if (!std::isfinite(cb->default_parameters[i]))
      throw InputError("xc callback '" + cb->name + "': parameter '" + cb->parameter_names[i] + "' is not finite");
  if (!cb->line && !cb->atom) throw InputError("xc callback '" + cb->name + "' is written for no geometry");
  std::shared_ptr<const XcCallback> replaced;  // released outside the lock: it may hold foreign objects
  std::lock_guard<std::mutex> lock(registry_mutex());
  std::swap(registry()[cb->name], cb);
  replaced = std::move(cb);
}

bool remove_xc_callback(const std::string& name) {
  std::shared_ptr<const XcCallback> gone;  // released outside the lock: it may hold foreign objects
  std::lock_guard<std::mutex> lock(registry_mutex());
  const auto it = registry().find(name);
  if (it == registry().end()) return false;
  gone = std::move(it->second);
  registry().erase(it);
  return true;
}

void clear_xc_callbacks() {
  std::map<std::string, std::shared_ptr<const XcCallback>> gone;
  {
    std::lock_guard<std::mutex> lock(registry_mutex());
    gone.swap(registry());
  }
}

std::vector<std::string> xc_callback_names() {
  std::lock_guard<std::mutex> lock(registry_mutex());
  std::vector<std::string> names;
  for (const auto& [k, v] : registry()) names.push_back(k);
  return names;
}

std::unique_ptr<XcTerm> make_callback_term(const std::string& name, const std::vector<double>& params,
                                           const XcSettings& settings) {
  std::shared_ptr<const XcCallback> cb;
  {
    std::lock_guard<std::mutex> lock(registry_mutex());
    if (const auto it = registry().find(name); it != registry().end()) cb = it->second;
  }
  if (!cb) {
    const auto names = xc_callback_names();
    const std::string near = nearest_word(name, names);
    std::string known;
    for (const auto& n : names) known += (known.empty() ? "" : ", ") + n;
    throw InputError("no xc callback named '" + name + "' is registered" +
                     (near.empty() ? "" : "; did you mean '" + near + "'?") +
                     (known.empty() ? " (none is; register the term before reading inputs that use it)"
                                    : " (registered: " + known + ")"));
  }
  if (settings.one_dimensional ? !cb->line : !cb->atom)
    throw InputError("xc callback '" + name + "' is written for " + (cb->line ? "line systems" : "atoms") +
                     "; it cannot be used for " + (settings.one_dimensional ? "a line system" : "an atom"));
  std::vector<double> p = params.empty() ? cb->default_parameters : params;
  if (p.size() != cb->parameter_names.size())
    throw InputError("xc callback '" + name + "' takes " + std::to_string(cb->parameter_names.size()) +
                     " parameters, got " + std::to_string(p.size()));
  return std::make_unique<CallbackTerm>(std::move(cb), std::move(p), settings);
}

}  // namespace stillpoint
