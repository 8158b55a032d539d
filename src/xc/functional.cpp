#include "stillpoint/xc/functional.hpp"

#include <xc.h>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdlib>
#include <limits>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/callback_term.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/soft_exchange_1d.hpp"

namespace stillpoint {

void XcDerivatives::reset(int nspin, std::size_t np, bool gradient, int order) {
  const std::size_t ns = static_cast<std::size_t>(nspin);
  const std::size_t nsig = nspin == 1 ? 1 : 3;
  e.assign(np, 0.0);
  vrho.assign(np * ns, 0.0);
  vsigma.assign(gradient ? np * nsig : 0, 0.0);
  if (order >= 2) {
    v2rho2.assign(np * (nspin == 1 ? 1 : 3), 0.0);
    v2rhosigma.assign(gradient ? np * (nspin == 1 ? 1 : 6) : 0, 0.0);
    v2sigma2.assign(gradient ? np * (nspin == 1 ? 1 : 6) : 0, 0.0);
  } else {
    v2rho2.clear();
    v2rhosigma.clear();
    v2sigma2.clear();
  }
}

void XcFunctional::add(std::unique_ptr<XcTerm> term, double weight) {
  terms_.emplace_back(std::move(term));
  weights_.push_back(weight);
}

bool XcFunctional::needs_gradient() const {
  return std::any_of(terms_.begin(), terms_.end(), [](const auto& t) { return t->needs_gradient(); });
}

std::string XcFunctional::describe() const {
  if (terms_.empty()) return "none (Hartree only)";
  std::ostringstream s;
  for (std::size_t i = 0; i < terms_.size(); ++i) {
    if (i) s << " + ";
    if (weights_[i] != 1.0) s << weights_[i] << "*";
    s << terms_[i]->name();
  }
  return s.str();
}

void XcFunctional::evaluate(const XcPointData& in, int order, XcDerivatives& out) const {
  out.reset(in.nspin, in.np, needs_gradient(), order);
  for (std::size_t i = 0; i < terms_.size(); ++i) terms_[i]->accumulate(in, weights_[i], order, out);
}

namespace {

std::string lower(std::string s) {
  std::transform(s.begin(), s.end(), s.begin(), [](unsigned char c) { return std::tolower(c); });
  return s;
}

std::vector<std::string> all_libxc_names() {
  std::vector<std::string> names;
  int n = xc_number_of_functionals();
  std::vector<int> ids(static_cast<std::size_t>(n));
  xc_available_functional_numbers(ids.data());
  for (int id : ids) {
    char* nm = xc_functional_get_name(id);
    if (nm) {
      names.emplace_back(nm);
      std::free(nm);
    }
  }
  return names;
}

// A tail switch (see LibxcTerm::probe_tail) above this density would change total energies
// noticeably; such functionals are refused instead.
constexpr double kLargestTailCut = 1e-6;
// Density (bohr^-3) below which the tail switch may act when it is widened past one decade.
constexpr double kSwitchTop = 1e-5;

// Largest |d e / d n_s| or |d e / d sigma| taken from libxc's fully polarized limit for a spin
// that is absent at a point (hartree, hartree bohr^5); beyond it the limit is not physical.
constexpr double kAbsentSpinLimit = 1e3;

// Static refusal rules (libxc's family, kind and flags); libxc_refusal adds the tail probe.
std::string flag_refusal(int id, bool one_dimensional);

// sqrt of the smallest sigma libxc may see; sigma = 1e-200 is only met at stationary points of
// the density, where any GGA is finite.
constexpr double kSigmaFloorRoot = 1e-100;

// Thin RAII holder so a term can be copied into threads without re-initialising libxc.
struct LibxcHandle {
  xc_func_type f{};
  bool ok = false;
  LibxcHandle(int id, int spin) { ok = xc_func_init(&f, id, spin) == 0; }
  ~LibxcHandle() {
    if (ok) xc_func_end(&f);
  }
  LibxcHandle(const LibxcHandle&) = delete;
  LibxcHandle& operator=(const LibxcHandle&) = delete;
};

class LibxcTerm final : public XcTerm {
 public:
  LibxcTerm(int id, const XcSettings& settings) : id_(id), unpol_(id, XC_UNPOLARIZED), pol_(id, XC_POLARIZED) {
    if (!unpol_.ok || !pol_.ok) throw InputError("libxc could not initialise functional " + std::to_string(id));
    if (const std::string why = flag_refusal(id, settings.one_dimensional); !why.empty()) throw InputError(why);
    const xc_func_info_type* info = unpol_.f.info;
    family_ = xc_func_info_get_family(info);
    kind_ = xc_func_info_get_kind(info);
    char* nm = xc_functional_get_name(id);
    name_ = nm ? nm : std::to_string(id);
    std::free(nm);
    const bool is1d = (xc_func_info_get_flags(info) & XC_FLAGS_1D) != 0;
    double thr = settings.density_threshold;
    // PBE-type correlation returns NaN below ~1.4e-27 in libxc 5.2.3.
    if (family_ == XC_FAMILY_GGA && kind_ != XC_EXCHANGE) thr = std::max(thr, 1e-26);
    threshold_ = thr;
    for (LibxcHandle* h : {&unpol_, &pol_}) {
      xc_func_set_dens_threshold(&h->f, thr);
      // libxc raises sigma to sigma_threshold^2 (1e-40 by default) but returns vsigma at the
      // raised value: in a tail where sigma falls below that (He beyond 19 bohr) the energy no
      // longer follows the density, and B88's vrho grows like 1/n (1e5 hartree at n = 1e-30).
      // Only the density threshold may cut, so this floor must never be reached by a density
      // above it.
      xc_func_set_sigma_threshold(&h->f, kSigmaFloorRoot);
      if (is1d) configure_1d(h->f, settings.softening);
    }
    tail_cut_ = probe_tail();
    if (tail_cut_ > 0.0) switch_decades_ = std::clamp(std::log10(kSwitchTop / tail_cut_), 1.0, 3.0);
    minority_floor_ = probe_minority_floor();
    open_shell_refusal_ = probe_minority_divergence();
    if (const double n = probe_collapse(is1d); n > 0.0) {
      std::ostringstream m;
      m << "functional '" << name_ << "' (" << xc_func_info_get_name(info) << ") has an energy density that falls "
        << "below minus the kinetic energy density of the uniform gas at n = " << n << (is1d ? " bohr^-1" : " bohr^-3")
        << " (it is a fit outside its range there): the Kohn-Sham energy has no lower bound, so it is refused";
      throw InputError(m.str());
    }
    if (tail_cut_ > kLargestTailCut) {
      std::ostringstream m;
      m << "functional '" << name_ << "' (" << xc_func_info_get_name(info)
        << ") has potentials or energies above 0.5 hartree (or rounding noise, or NaN) in exponentially "
           "decaying tails at densities up to "
        << tail_cut_ / 10.0 << " bohr^-3; switching it off there would change its energies, so it is refused";
      throw InputError(m.str());
    }
  }

  /// Density below which this term is switched off (0: never). Only functionals whose potential
  /// diverges in an exponentially decaying tail get one (see probe_tail).
  double tail_cut() const override { return tail_cut_; }
  double tail_on() const override { return tail_cut_ > 0.0 ? tail_cut_ * std::pow(10.0, switch_decades_) : 0.0; }
  std::string open_shell_refusal() const override { return open_shell_refusal_; }

  std::string name() const override { return name_; }
  bool needs_gradient() const override { return family_ == XC_FAMILY_GGA; }

  void accumulate(const XcPointData& in, double weight, int order, XcDerivatives& out) const override {
    if (in.np == 0 || weight == 0.0) return;
    if (in.nspin == 2 && kind_ == XC_EXCHANGE) {
      spin_scaled(in, weight, order, out);
      return;
    }
    if (tail_cut_ == 0.0) {
      raw(in, weight, order, out);
      return;
    }
    // Points below the cut are never evaluated: libxc may return NaN there.
    const int ns = in.nspin, nsig = ns == 1 ? 1 : 3;
    XcPointData kept;
    kept.nspin = ns;
    std::vector<std::size_t> at;
    for (std::size_t i = 0; i < in.np; ++i) {
      double n = 0.0;
      for (int s = 0; s < ns; ++s) n += in.rho[ns * i + s];
      if (!(n > tail_cut_)) continue;
      at.push_back(i);
      kept.rho.insert(kept.rho.end(), in.rho.begin() + ns * i, in.rho.begin() + ns * (i + 1));
      if (!in.sigma.empty()) kept.sigma.insert(kept.sigma.end(), in.sigma.begin() + nsig * i, in.sigma.begin() + nsig * (i + 1));
    }
    kept.np = at.size();
    if (kept.np == 0) return;
    XcDerivatives t;
    t.reset(ns, kept.np, gga(), order);
    raw(kept, 1.0, order, t);
    switch_off_tail(kept, order, t);
    auto scatter = [&](const std::vector<double>& a, std::vector<double>& b, std::size_t per) {
      for (std::size_t j = 0; j < at.size(); ++j)
        for (std::size_t k = 0; k < per; ++k) b[per * at[j] + k] += weight * a[per * j + k];
    };
    scatter(t.e, out.e, 1);
    scatter(t.vrho, out.vrho, ns);
    if (gga()) scatter(t.vsigma, out.vsigma, nsig);
    if (order >= 2) {
      scatter(t.v2rho2, out.v2rho2, ns == 1 ? 1 : 3);
      if (gga()) {
        scatter(t.v2rhosigma, out.v2rhosigma, ns == 1 ? 1 : 6);
        scatter(t.v2sigma2, out.v2sigma2, ns == 1 ? 1 : 6);
      }
    }
  }

 private:
  struct Buffers {
    std::vector<double> zk, vrho, vsigma, v2rho2, v2rhosigma, v2sigma2;
    Buffers(std::size_t np, int nspin, int order) {
      const std::size_t a = nspin == 1 ? 1 : 2, s3 = nspin == 1 ? 1 : 3, s6 = nspin == 1 ? 1 : 6;
      zk.assign(np, 0.0);
      vrho.assign(np * a, 0.0);
      vsigma.assign(np * s3, 0.0);
      if (order >= 2) {
        v2rho2.assign(np * s3, 0.0);
        v2rhosigma.assign(np * s6, 0.0);
        v2sigma2.assign(np * s6, 0.0);
      }
    }
  };

  void raw(const XcPointData& in, double weight, int order, XcDerivatives& out) const {
    if (in.nspin == 1)
      unpolarized(in, weight, order, out);
    else if (kind_ == XC_EXCHANGE)
      spin_scaled(in, weight, order, out);
    else
      polarized(in, weight, order, out);
  }

  // Some functionals have potentials that grow without bound where the density decays
  // exponentially (gradient expansions such as Herman's, G96, and others), and some libxc
  // implementations return NaN or cancellation noise at very low densities; either way the
  // self-consistent solution would depend on where the grid's density threshold happens to cut.
  // The probe walks down model tails n = exp(-a r) (a = 1, 2, 2.8 bohr^-1, sigma = a^2 n^2) from
  // n = 1e-3, unpolarized and fully polarized, and estimates the local potential
  // v = vrho - a^2 d(2 vsigma a n)/d ln n. Where |v| first exceeds kTailPotential, the curve
  // turns rough (rounding noise), or a value is not finite, the term is switched off smoothly below ten times that density (see
  // switch_off_tail). Functionals whose tail potentials stay bounded (LDA, PBE, B88, LYP, ...)
  // are untouched. Returns 0 (no cut) or the cut density.
  double probe_tail() const {
    constexpr double kTailPotential = 0.5;  // hartree; physical tail potentials are far smaller
    constexpr double kTailNoise = 1e-3;     // hartree, second difference per step of 0.25 in ln n
    constexpr double kRelativeNoiseBelow = 1e-7;  // bohr^-3
    constexpr double kRippleCutBelow = 1e-10;     // bohr^-3
    const double lo = std::max(threshold_, 1e-30);
    std::vector<double> dens;
    for (double ln = std::log(1e-3); ln > std::log(lo) + 1e-9; ln -= 0.25) dens.push_back(std::exp(ln));
    const std::size_t m = dens.size();
    if (m < 3) return 0.0;
    double bad = 0.0;  // highest density of a violation
    auto walk = [&](bool polarized, double a, bool ripples_only) {
      std::vector<double> rho, sigma;
      for (double n : dens) {
        if (polarized) {
          rho.insert(rho.end(), {n, 0.0});
          sigma.insert(sigma.end(), {a * a * n * n, 0.0, 0.0});
        } else {
          rho.push_back(n);
          sigma.push_back(a * a * n * n);
        }
      }
      Buffers b(m, polarized ? 2 : 1, 2);
      eval(polarized ? pol_.f : unpol_.f, m, rho.data(), gga() ? sigma.data() : nullptr, 2, b);
      const std::size_t vs = polarized ? 2 : 1, ss = polarized ? 3 : 1;
      std::vector<double> flux(m, 0.0);
      for (std::size_t j = 0; j < m; ++j) flux[j] = gga() ? 2.0 * b.vsigma[ss * j] * a * dens[j] : 0.0;
      std::vector<double> v(m);
      for (std::size_t j = 0; j < m; ++j) {
        const std::size_t j0 = j == 0 ? 0 : j - 1, j1 = j + 1 == m ? j : j + 1;
        v[j] = b.vrho[vs * j] - a * a * (flux[j1] - flux[j0]) / (std::log(dens[j1]) - std::log(dens[j0]));
      }
      std::vector<double> d2(m, 0.0);  // second differences (0 at the ends)
      for (std::size_t j = 1; j + 1 < m; ++j) d2[j] = v[j + 1] - 2.0 * v[j] + v[j - 1];
      for (std::size_t j = 0; j < m; ++j) {
        // Rounding noise (cancellation in some libxc forms at huge r_s) shows as a rough curve.
        // Only far below any density that matters: real potentials curve at higher densities.
        const double rough = dens[j] < 1e-12 ? std::abs(d2[j]) : 0.0;
        // Below densities that matter, a curve whose second differences alternate in sign three
        // times running, each larger than a fifth of the potential (Q2D's 2D limit loses its
        // digits near n = 1e-8), is rounding noise relative to its own size: the SCF stalls there.
        bool jagged = dens[j] < kRelativeNoiseBelow && j >= 2 && j + 2 < m;
        for (std::size_t q = j - 1; jagged && q <= j + 1; ++q)
          jagged = d2[q] * d2[q + 1] < 0.0 && std::abs(d2[q]) > 0.2 * std::abs(v[q]) + 1e-9;
        bool finite = std::isfinite(v[j]) && std::isfinite(b.zk[j]) && std::isfinite(b.v2rho2[(polarized ? 3 : 1) * j]);
        // Fully polarized: the absent spin's potential is libxc's limit where that stays below
        // kAbsentSpinLimit (see polarized()); a limit that large where the tail is thin digs a
        // well that traps ghost minority states (OP with G96 exchange: -260 hartree at n = 4e-14).
        const double v_absent = polarized && kind_ == XC_CORRELATION ? b.vrho[2 * j + 1] : 0.0;
        const bool deep_absent = std::abs(v_absent) > kTailPotential && std::abs(v_absent) <= kAbsentSpinLimit;
        if (gga())
          finite = finite && std::isfinite(b.v2sigma2[(polarized ? 6 : 1) * j]) &&
                   std::isfinite(b.v2rhosigma[(polarized ? 6 : 1) * j]);
        // The energy per particle too (the switch below adds e dS/dn to the potential), with
        // more room: it may grow slowly where the potential stays moderate (G96).
        // Ripple stability (ripple_stability in on_mesh.hpp): 4 n e_gg < -1 makes density ripples
        // lower the energy without bound. Far below densities that matter such a tail is
        // switched off; where it matters the SCF reports the functional as unstable instead.
        bool ripples = false;
        if (gga() && dens[j] < kRippleCutBelow) {
          const double egg = 2.0 * b.vsigma[ss * j] + 4.0 * sigma[ss * j] * b.v2sigma2[(polarized ? 6 : 1) * j];
          ripples = 4.0 * dens[j] * egg < -1.0;
        }
        if (ripples_only ? ripples
                         : !finite || !(std::abs(v[j]) <= kTailPotential) || !(std::abs(b.zk[j]) <= 10.0 * kTailPotential) ||
                               !(rough <= kTailNoise + 0.05 * std::abs(v[j])) || jagged || ripples || deep_absent) {
          bad = std::max(bad, dens[j]);
          return;
        }
      }
    };
    for (double a : {1.0, 2.0, 2.8}) {  // 2 sqrt(2 I) for ionization energies 0.1..1 hartree
      walk(false, a, false);
      if (kind_ != XC_EXCHANGE) walk(true, a, false);  // exchange is spin-scaled from unpolarized calls
    }
    // SCF iterates pass through slower tails than converged ones (NCAP's ripple bound fails
    // in them below 1e-10 and stalls Kr); only the ripple test is applied to those.
    for (double a : {0.25, 0.5}) {
      walk(false, a, true);
      if (kind_ != XC_EXCHANGE) walk(true, a, true);
    }
    return bad > 0.0 ? 10.0 * bad : 0.0;
  }

  // A density at which e(n) < -t(n), the kinetic energy density of the uniform gas (1D:
  // pi^2 n^3 / 24, 3D: (3/10)(3 pi^2)^(2/3) n^(5/3)), for a uniform density of 1..1e6 bohr^-d;
  // 0 when there is none. Such a functional makes the energy unbounded below (collapse).
  double probe_collapse(bool one_d) const {
    std::vector<double> rho, sigma;
    for (double n = 1.0; n <= 1e6; n *= 10.0) {
      rho.push_back(n);
      sigma.push_back(0.0);
    }
    const std::size_t m = rho.size();
    Buffers b(m, 1, 1);
    eval(unpol_.f, m, rho.data(), gga() ? sigma.data() : nullptr, 1, b);
    const double pi = 3.14159265358979323846;
    for (std::size_t j = 0; j < m; ++j) {
      const double n = rho[j];
      const double t = one_d ? pi * pi * n * n * n / 24.0 : 0.3 * std::pow(3.0 * pi * pi, 2.0 / 3.0) * std::pow(n, 5.0 / 3.0);
      if (std::isfinite(b.zk[j]) && b.zk[j] * n < -t) return n;
    }
    return 0.0;
  }

  // Polarized correlation: the largest minority density at which libxc returns a non-finite
  // value (majority densities 1e-2..1e-20, minority ones from 1e-3 of that down, model tails of
  // several decay constants), times ten (0 if none). A minority density below that is then taken
  // as exactly zero, libxc's own fully polarized limit; it carries no electron anyone could see.
  // (B97-type same-spin terms give NaN below n_minority = 1e-18 whatever the majority density:
  // an absolute floor. A floor relative to the majority density, as once used, cut at 1e-3 of
  // it, where the minority terms still carry 1e-5 hartree, and made Li's SCF flip between two
  // states.)
  double probe_minority_floor() const {
    if (kind_ == XC_EXCHANGE) return 0.0;
    double worst = 0.0;
    std::vector<double> rho, sigma;
    for (double up = 1e-2; up > 1e-21; up *= 0.1)
      for (double au : {1.0, 2.0})
        for (double ad : {1.0, 2.0, 4.0})
          for (double dn = up * 1e-3; dn > 1e-32; dn *= 0.1) {
            rho.insert(rho.end(), {up, dn});
            sigma.insert(sigma.end(), {au * au * up * up, au * ad * up * dn, ad * ad * dn * dn});
          }
    const std::size_t m = rho.size() / 2;
    Buffers b(m, 2, 2);
    eval(pol_.f, m, rho.data(), gga() ? sigma.data() : nullptr, 2, b);
    for (std::size_t j = 0; j < m; ++j) {
      bool ok = std::isfinite(b.zk[j]) && std::isfinite(b.vrho[2 * j]) && std::isfinite(b.vrho[2 * j + 1]);
      for (int k = 0; k < 3; ++k) ok = ok && std::isfinite(b.v2rho2[3 * j + k]);
      if (gga())
        for (int k = 0; k < 6; ++k)
          ok = ok && std::isfinite(b.v2rhosigma[6 * j + k]) && std::isfinite(b.v2sigma2[6 * j + k]) &&
               std::isfinite(b.vsigma[3 * (j) + k % 3]);
      if (!ok) worst = std::max(worst, rho[2 * j + 1]);
    }
    return worst > 0.0 ? 10.0 * worst : 0.0;
  }

  // Where one spin's density vanishes beside the other's (the tail of Li, whose 1s down density
  // decays much faster than its 2s up density), some correlation functionals have a minority
  // potential that grows without bound, like n_minority^(-1/3) (ML, PK09, modified Chachiyo,
  // SOGGA11) or like its logarithm (OP). The Kohn-Sham potential of that spin is then unbounded
  // below in the tail and the open-shell problem has no ground state: the SCF can only diverge.
  // The probe follows v_minority at fixed majority densities (1e-1, 1e-3 bohr^-3) as the ratio
  // falls from 1e-3 to 1e-8 to 1e-13, with tail-like gradients (the minority decaying three
  // times faster): a steady fall by more than 0.2 hartree per five decades, to below -1
  // hartree, is a divergence. Bounded forms (PW92, LYP, HCTH) change by less than 0.1.
  std::string probe_minority_divergence() const {
    if (kind_ == XC_EXCHANGE) return {};  // spin-scaled: v_down depends on n_down alone
    // libxc treats 1 - zeta below about 1e-15 as fully polarized, so the ratios stay above that.
    const double ratios[3] = {1e-3, 1e-8, 1e-13};
    for (double up : {1e-1, 1e-3}) {
      std::vector<double> rho, sigma;
      for (double r : ratios) {
        const double dn = up * r, a = 1.0, b = 3.0;
        rho.insert(rho.end(), {up, dn});
        sigma.insert(sigma.end(), {a * a * up * up, a * b * up * dn, b * b * dn * dn});
      }
      Buffers buf(3, 2, 1);
      eval(pol_.f, 3, rho.data(), gga() ? sigma.data() : nullptr, 1, buf);
      double v[3];
      for (int k = 0; k < 3; ++k) v[k] = buf.vrho[2 * k + 1];
      const bool finite = std::isfinite(v[0]) && std::isfinite(v[1]) && std::isfinite(v[2]);
      // Only a fall towards minus infinity: a potential that grows to plus infinity (PBE-type
      // correlation, like (1 - zeta)^(-1/3)) is a barrier the minority electrons stay out of.
      const bool falls = finite && v[1] < v[0] - 0.2 && v[2] < v[1] - 0.2 && v[2] < -1.0;
      if (falls) {
        std::ostringstream m;
        m << "functional '" << name_ << "' (" << xc_func_info_get_name(unpol_.f.info)
          << ") has a minority-spin potential that falls without bound as the spin polarization approaches 1 (at n_majority = "
          << up << " bohr^-3: " << v[0] << ", " << v[1] << ", " << v[2]
          << " hartree for n_minority/n_majority = 1e-3, 1e-8, 1e-13); in an open-shell atom the minority density "
             "decays faster than the majority one, so that potential is unbounded below in the tail and the "
             "spin-polarized problem has no ground state. Use it for closed shells, unpolarized, or with one spin "
             "channel empty";
        return m.str();
      }
    }
    return {};
  }

  // e -> S(n) e with S = 0 below the tail cut, 1 above switch_decades_ decades higher, and the
  // quintic smoothstep in log10(n / cut) between: every derivative follows, so the potential and
  // the kernel stay the exact derivatives of the discrete energy.
  void switch_off_tail(const XcPointData& in, int order, XcDerivatives& t) const {
    const int ns = in.nspin;
    const double K = switch_decades_;
    const double ln10 = std::log(10.0) * K;  // dx/dn = 1 / (n ln10)
    for (std::size_t i = 0; i < in.np; ++i) {
      double n = 0.0;
      for (int s = 0; s < ns; ++s) n += in.rho[ns * i + s];
      const double x = n > 0.0 ? std::log10(n / tail_cut_) / K : -1.0;
      if (x >= 1.0) continue;
      double S = 0.0, dS = 0.0, d2S = 0.0;  // d/dn and d2/dn2
      if (x > 0.0) {
        S = x * x * x * (10.0 + x * (-15.0 + 6.0 * x));
        const double Sx = 30.0 * x * x * (1.0 - x) * (1.0 - x);
        const double Sxx = 60.0 * x * (1.0 - x) * (1.0 - 2.0 * x);
        dS = Sx / (n * ln10);
        d2S = (Sxx / (ln10 * ln10) - Sx / ln10) / (n * n);
      }
      const double e = t.e[i];
      double v[2] = {t.vrho[ns * i], ns == 2 ? t.vrho[ns * i + 1] : 0.0};
      if (order >= 2) {
        const int n2 = ns == 1 ? 1 : 3;
        for (int k = 0; k < n2; ++k) {
          const int a = ns == 1 ? 0 : (k == 2 ? 1 : 0), b = ns == 1 ? 0 : (k == 0 ? 0 : 1);
          t.v2rho2[n2 * i + k] = S * t.v2rho2[n2 * i + k] + dS * (v[a] + v[b]) + d2S * e;
        }
        if (gga()) {
          const int nsig = ns == 1 ? 1 : 3;
          for (int s = 0; s < ns; ++s)
            for (int k = 0; k < nsig; ++k) {
              double& x2 = t.v2rhosigma[(ns == 1 ? 1 : 6) * i + nsig * s + k];
              x2 = S * x2 + dS * t.vsigma[nsig * i + k];
            }
          for (std::size_t k = 0; k < (ns == 1 ? 1u : 6u); ++k) t.v2sigma2[(ns == 1 ? 1 : 6) * i + k] *= S;
        }
      }
      for (int s = 0; s < ns; ++s) t.vrho[ns * i + s] = S * v[s] + dS * e;
      if (gga())
        for (int k = 0; k < (ns == 1 ? 1 : 3); ++k) t.vsigma[(ns == 1 ? 1 : 3) * i + k] *= S;
      t.e[i] = S * e;
    }
  }

  void configure_1d(xc_func_type& f, double a) const {
    const int n = xc_func_info_get_n_ext_params(f.info);
    for (int i = 0; i < n; ++i) {
      const std::string pname = xc_func_info_get_ext_params_name(f.info, i);
      if (pname == "beta") {
        // libxc calls exit() for untabulated CSC parameters, so refuse them here.
        if (id_ == XC_LDA_C_1D_CSC && !(a == 0.5 || a == 1.0))
          throw InputError("lda_c_1d_csc is tabulated only for soft-Coulomb softening 0.5 or 1 (got " +
                           std::to_string(a) + ")");
        xc_func_set_ext_params_name(&f, "beta", a);
      } else if (pname == "interaction") {
        xc_func_set_ext_params_name(&f, "interaction", 1.0);  // soft-Coulomb, like our Hartree term
      }
    }
  }

  void eval(const xc_func_type& f, std::size_t np, const double* rho, const double* sigma, int order,
            Buffers& b) const {
    if (family_ == XC_FAMILY_LDA) {
      if (order >= 2)
        xc_lda_exc_vxc_fxc(&f, np, rho, b.zk.data(), b.vrho.data(), b.v2rho2.data());
      else
        xc_lda_exc_vxc(&f, np, rho, b.zk.data(), b.vrho.data());
    } else {
      if (order >= 2)
        xc_gga_exc_vxc_fxc(&f, np, rho, sigma, b.zk.data(), b.vrho.data(), b.vsigma.data(), b.v2rho2.data(),
                           b.v2rhosigma.data(), b.v2sigma2.data());
      else
        xc_gga_exc_vxc(&f, np, rho, sigma, b.zk.data(), b.vrho.data(), b.vsigma.data());
    }
  }

  // A non-finite value from libxc at a point above the density threshold is an error that
  // names the functional and the point: dropping it would change the functional silently.
  double finite(double v, const XcPointData& in, std::size_t i) const {
    if (std::isfinite(v)) return v;
    std::ostringstream m;
    m.precision(17);
    m << "libxc functional '" << name_ << "' returned a non-finite value at a point with density";
    for (int s = 0; s < in.nspin; ++s) m << " " << in.rho[in.nspin * i + s];
    if (gga() && !in.sigma.empty()) {
      m << " and sigma";
      const int ns = in.nspin == 1 ? 1 : 3;
      for (int k = 0; k < ns; ++k) m << " " << in.sigma[ns * i + k];
    }
    m << " (bohr^-3, bohr^-8); raise [scf] density_threshold above that density";
    throw NumericalError(m.str());
  }
  bool gga() const { return family_ == XC_FAMILY_GGA; }

  void unpolarized(const XcPointData& in, double w, int order, XcDerivatives& out) const {
    Buffers b(in.np, 1, order);
    eval(unpol_.f, in.np, in.rho.data(), in.sigma.data(), order, b);
    for (std::size_t i = 0; i < in.np; ++i) {
      out.e[i] += w * finite(b.zk[i] * in.rho[i], in, i);
      out.vrho[i] += w * finite(b.vrho[i], in, i);
      if (gga()) out.vsigma[i] += w * finite(b.vsigma[i], in, i);
      if (order >= 2) {
        out.v2rho2[i] += w * finite(b.v2rho2[i], in, i);
        if (gga()) {
          out.v2rhosigma[i] += w * finite(b.v2rhosigma[i], in, i);
          out.v2sigma2[i] += w * finite(b.v2sigma2[i], in, i);
        }
      }
    }
  }

  // E_x[n_up, n_dn] = E_x[2 n_up]/2 + E_x[2 n_dn]/2 with unpolarized calls: exact for exchange and
  // free of libxc's erratic polarized GGA exchange near full polarization.
  void spin_scaled(const XcPointData& in, double w, int order, XcDerivatives& out) const {
    const std::size_t np = in.np;
    // Each spin as an unpolarized density 2 n_s, through the same path as unpolarized input
    // (so the tail cut acts on each spin's own density, as the scaling relation demands).
    XcPointData u;
    u.nspin = 1;
    u.np = 2 * np;
    u.rho.resize(2 * np);
    u.sigma.resize(gga() ? 2 * np : 0);
    for (std::size_t i = 0; i < np; ++i) {
      u.rho[i] = 2.0 * in.rho[2 * i];
      u.rho[np + i] = 2.0 * in.rho[2 * i + 1];
      if (gga()) {
        u.sigma[i] = 4.0 * in.sigma[3 * i];
        u.sigma[np + i] = 4.0 * in.sigma[3 * i + 2];
      }
    }
    XcDerivatives t;
    t.reset(1, 2 * np, gga(), order);
    accumulate(u, 1.0, order, t);
    for (std::size_t i = 0; i < np; ++i) {
      for (int s = 0; s < 2; ++s) {
        const std::size_t j = s * np + i;
        if (u.rho[j] <= threshold_) continue;
        out.e[i] += w * 0.5 * t.e[j];
        out.vrho[2 * i + s] += w * t.vrho[j];
        if (gga()) out.vsigma[3 * i + 2 * s] += w * 2.0 * t.vsigma[j];
        if (order >= 2) {
          out.v2rho2[3 * i + 2 * s] += w * 2.0 * t.v2rho2[j];
          if (gga()) {
            out.v2rhosigma[6 * i + 5 * s] += w * 4.0 * t.v2rhosigma[j];
            out.v2sigma2[6 * i + 5 * s] += w * 8.0 * t.v2sigma2[j];
          }
        }
      }
    }
  }

  // libxc on (rho, sigma) with the spins flagged in `absent` (bit 0 up, bit 1 down) at zero,
  // per point of `pts` (indices into `in`, for messages), written unweighted into d.
  void polarized_terms(const XcPointData& in, const std::vector<std::size_t>& pts, const std::vector<double>& rho,
                       const std::vector<double>& sigma, const std::vector<int>& absent_of, int order,
                       XcDerivatives& d) const {
    const std::size_t np = pts.size();
    d.reset(2, np, gga(), order);
    Buffers b(np, 2, order);
    eval(pol_.f, np, rho.data(), gga() ? sigma.data() : nullptr, order, b);
    // Spins each sigma component involves: uu -> up, ud -> both, dd -> down.
    static constexpr int kSigmaSpins[3] = {1, 3, 2};
    static constexpr int kPair[6][2] = {{0, 0}, {0, 1}, {0, 2}, {1, 1}, {1, 2}, {2, 2}};
    for (std::size_t j = 0; j < np; ++j) {
      const std::size_t i = pts[j];
      const double tot = rho[2 * j] + rho[2 * j + 1];
      const int absent = absent_of[j];
      // A derivative with respect to an absent spin is libxc's fully polarized limit where it
      // has one (what an empty minority level feels in the tail). Where it has none (B97-type
      // same-spin terms give NaN at n_s = 0) it is 0: the exact derivative of the discrete rule,
      // under which a spin below the floor counts as absent and the energy does not depend on it.
      // A limit larger than any physical potential (LYP-type (1 - zeta) terms) is no limit either.
      auto limit = [&](double v, int spins) {
        return (spins & absent) && !(std::abs(v) <= kAbsentSpinLimit) ? 0.0 : finite(v, in, i);
      };
      d.e[j] = finite(b.zk[j] * tot, in, i);
      for (int sp = 0; sp < 2; ++sp) d.vrho[2 * j + sp] = limit(b.vrho[2 * j + sp], 1 << sp);
      if (gga())
        for (int k = 0; k < 3; ++k) d.vsigma[3 * j + k] = limit(b.vsigma[3 * j + k], kSigmaSpins[k]);
      // The energy carries the absent spin's part to first order, limit times its actual density
      // (or gradient invariant): then the limit is the exact derivative of the energy (to the
      // limit's own variation with the other spin, a term of order n_absent), and the blend in
      // polarized() differentiates cleanly. It adds below 1e-14 of the local energy density.
      if (absent) {
        for (int sp = 0; sp < 2; ++sp)
          if (absent & (1 << sp)) d.e[j] += d.vrho[2 * j + sp] * in.rho[2 * i + sp];
        if (gga())
          for (int k = 0; k < 3; ++k)
            if (absent & kSigmaSpins[k]) d.e[j] += d.vsigma[3 * j + k] * in.sigma[3 * i + k];
      }
      if (order < 2) continue;
      for (int k = 0; k < 3; ++k) {
        // Second derivatives in an absent spin can be ~1e9; they multiply a response that is
        // identically zero, so mask them.
        const int spins = k == 0 ? 1 : k == 1 ? 3 : 2;
        d.v2rho2[3 * j + k] = (spins & absent) ? 0.0 : finite(b.v2rho2[3 * j + k], in, i);
      }
      if (gga())
        for (int k = 0; k < 6; ++k) {
          const int rs = (1 << (k / 3)) | kSigmaSpins[k % 3];
          const int ss = kSigmaSpins[kPair[k][0]] | kSigmaSpins[kPair[k][1]];
          // Second derivatives in an absent spin: 0, the derivative of the discrete rule.
          d.v2rhosigma[6 * j + k] = (rs & absent) ? 0.0 : finite(b.v2rhosigma[6 * j + k], in, i);
          d.v2sigma2[6 * j + k] = (ss & absent) ? 0.0 : finite(b.v2sigma2[6 * j + k], in, i);
        }
    }
  }

  void polarized(const XcPointData& in, double w, int order, XcDerivatives& out) const {
    const std::size_t np = in.np;
    std::vector<double> rho(in.rho), sigma(in.sigma);
    std::vector<int> absent(np, 0);
    // A vanishing spin density is passed as exactly zero: libxc's clamping of tiny spin
    // densities produces spurious correlation potentials otherwise. Between the floor L and
    // kAbsentBlend decades above it the two evaluations are blended, e = e0 + S (e1 - e0) and
    // likewise every derivative, with the quintic step S in log(n_s / L). A hard floor made the
    // minority potential jump there, by hundreds of hartree for PBE-type forms whose minority
    // potential grows like a power of 1/(1 - zeta) (zPBEint, zPBEsol, SG4 on Li): the SCF then
    // hopped across the floor and stalled at 1e-6 hartree. The potential leaves out the term
    // (dS/dn) (e1 - e0) of the exact derivative: e1 - e0 is about 1e-14 of e, so divided by n_s
    // it is rounding noise of 1e-3 hartree that kept Li's unoccupied 2s down level from settling.
    // Its weight is a spin density below 1e-12 of the local one; the kernel blends likewise
    // (symmetrized, as a Hessian).
    constexpr double kAbsentBlend = 2.0;    // decades
    constexpr double kAbsentBlendTop = 1e2;  // 10^kAbsentBlend
    struct Blend {
      std::size_t point;
      double S, Sa[2];  // S and dS/dn_a
    };
    std::vector<Blend> blends;
    std::vector<double> full_rho, full_sigma;
    for (std::size_t i = 0; i < np; ++i) {
      const double tot = rho[2 * i] + rho[2 * i + 1];
      const bool relative = 1e-14 * tot >= minority_floor_;
      const double L = std::max(1e-14 * tot, minority_floor_);
      // 0: present, 1: blended, 2: absent. Only a spin beside a present one is blended; where
      // both are near the floor (far tails of closed shells) the hard rule stays.
      int state[2];
      for (int s = 0; s < 2; ++s) {
        const double ns = rho[2 * i + s];
        state[s] = ns >= L * kAbsentBlendTop ? 0 : ns >= L && ns > 0.0 ? 1 : 2;
      }
      if (state[0] != 0 && state[1] != 0)
        for (int s = 0; s < 2; ++s) state[s] = rho[2 * i + s] >= L && rho[2 * i + s] > 0.0 ? 0 : 2;
      for (int s = 0; s < 2; ++s) {
        if (state[s] == 0) continue;
        const double ns = rho[2 * i + s];
        if (state[s] == 1) {
          const double c = 1.0 / (kAbsentBlend * std::log(10.0));
          const double y = c * std::log(ns / L);
          double ya[2];
          for (int a = 0; a < 2; ++a) ya[a] = c * ((a == s ? 1.0 / ns : 0.0) - (relative ? 1.0 / tot : 0.0));
          const double S = y * y * y * (10.0 + y * (-15.0 + 6.0 * y));
          const double S1 = 30.0 * y * y * (1.0 - y) * (1.0 - y);
          const Blend bl{i, S, {S1 * ya[0], S1 * ya[1]}};
          blends.push_back(bl);
          full_rho.insert(full_rho.end(), {rho[2 * i], rho[2 * i + 1]});
          if (gga()) full_sigma.insert(full_sigma.end(), {sigma[3 * i], sigma[3 * i + 1], sigma[3 * i + 2]});
        }
        rho[2 * i + s] = 0.0;
        absent[i] |= 1 << s;
        if (gga()) {
          sigma[3 * i + 2 * s] = 0.0;
          sigma[3 * i + 1] = 0.0;
        }
      }
    }
    std::vector<std::size_t> all(np);
    for (std::size_t i = 0; i < np; ++i) all[i] = i;
    XcDerivatives d0;
    polarized_terms(in, all, rho, sigma, absent, order, d0);
    if (!blends.empty()) {
      std::vector<std::size_t> sub;
      for (const Blend& bl : blends) sub.push_back(bl.point);
      XcDerivatives d1;
      polarized_terms(in, sub, full_rho, full_sigma, std::vector<int>(sub.size(), 0), order, d1);
      for (std::size_t j = 0; j < blends.size(); ++j) {
        const Blend& bl = blends[j];
        const std::size_t i = bl.point;
        const double S = bl.S, de = d1.e[j] - d0.e[i];
        double dv[2];
        for (int a = 0; a < 2; ++a) dv[a] = d1.vrho[2 * j + a] - d0.vrho[2 * i + a];
        d0.e[i] += S * de;
        if (order >= 2) {
          for (int k = 0; k < 3; ++k) {
            const int a = k == 2 ? 1 : 0, b = k == 0 ? 0 : 1;
            d0.v2rho2[3 * i + k] += S * (d1.v2rho2[3 * j + k] - d0.v2rho2[3 * i + k]) +
                                    0.5 * (bl.Sa[a] * dv[b] + bl.Sa[b] * dv[a]);
          }
          if (gga())
            for (int k = 0; k < 6; ++k) {
              const int a = k / 3, m = k % 3;
              d0.v2rhosigma[6 * i + k] += S * (d1.v2rhosigma[6 * j + k] - d0.v2rhosigma[6 * i + k]) +
                                          0.5 * bl.Sa[a] * (d1.vsigma[3 * j + m] - d0.vsigma[3 * i + m]);
              d0.v2sigma2[6 * i + k] += S * (d1.v2sigma2[6 * j + k] - d0.v2sigma2[6 * i + k]);
            }
        }
        for (int a = 0; a < 2; ++a) d0.vrho[2 * i + a] += S * dv[a];
        if (gga())
          for (int k = 0; k < 3; ++k) d0.vsigma[3 * i + k] += S * (d1.vsigma[3 * j + k] - d0.vsigma[3 * i + k]);
      }
    }
    for (std::size_t i = 0; i < np; ++i) {
      out.e[i] += w * d0.e[i];
      for (int a = 0; a < 2; ++a) out.vrho[2 * i + a] += w * d0.vrho[2 * i + a];
      if (gga())
        for (int k = 0; k < 3; ++k) out.vsigma[3 * i + k] += w * d0.vsigma[3 * i + k];
      if (order < 2) continue;
      for (int k = 0; k < 3; ++k) out.v2rho2[3 * i + k] += w * d0.v2rho2[3 * i + k];
      if (gga())
        for (int k = 0; k < 6; ++k) {
          out.v2rhosigma[6 * i + k] += w * d0.v2rhosigma[6 * i + k];
          out.v2sigma2[6 * i + k] += w * d0.v2sigma2[6 * i + k];
        }
    }
  }

  int id_;
  LibxcHandle unpol_, pol_;
  int family_ = 0, kind_ = 0;
  double threshold_ = 0;
  double tail_cut_ = 0;
  // Decades of density over which the tail switch rises: three, so that it spans a few bohr of
  // an exponential tail and several mesh nodes (over one decade, about one bohr and two or three
  // nodes of a tail element, S(n(r)) was a step the mesh could not resolve: the switched GGA
  // potential turned jagged and G96, AK13 and CAP stalled the SCF of Li and Na). The top of the
  // switch stays below kSwitchTop, where the functional is left untouched; never under one decade.
  double switch_decades_ = 1.0;
  std::string open_shell_refusal_;
  double minority_floor_ = 0;  // polarized: a spin density (bohr^-3) below this is taken as zero
  std::string name_;
};

// lda_x_1d_soft through the tabulated exact uniform-gas exchange: libxc integrates it
// numerically at every point (tens of microseconds), which would dominate 1D SCF runs.
class SoftExchange1dTerm final : public XcTerm {
 public:
  explicit SoftExchange1dTerm(double a) : a_(a) {}
  std::string name() const override { return "lda_x_1d_soft"; }
  bool needs_gradient() const override { return false; }
  void accumulate(const XcPointData& in, double w, int order, XcDerivatives& out) const override {
    for (std::size_t i = 0; i < in.np; ++i) {
      if (in.nspin == 1) {
        const SoftExchange1dValue v = soft_exchange_1d_unpolarized(in.rho[i], a_);
        out.e[i] += w * v.e;
        out.vrho[i] += w * v.de_dn;
        if (order >= 2) out.v2rho2[i] += w * v.d2e_dn2;
      } else {
        const SoftExchange1dSpinValue v = soft_exchange_1d_polarized(in.rho[2 * i], in.rho[2 * i + 1], a_);
        out.e[i] += w * v.e;
        out.vrho[2 * i] += w * v.de[0];
        out.vrho[2 * i + 1] += w * v.de[1];
        if (order >= 2)
          for (int k = 0; k < 3; ++k) out.v2rho2[3 * i + k] += w * v.d2e[k];
      }
    }
  }

 private:
  double a_;
};

int resolve_libxc_id(const std::string& raw) {
  std::string name = lower(raw);
  while (!name.empty() && std::isspace(static_cast<unsigned char>(name.back()))) name.pop_back();
  if (!name.empty() && std::all_of(name.begin(), name.end(), [](unsigned char c) { return std::isdigit(c); })) {
    const int id = std::stoi(name);
    char* nm = xc_functional_get_name(id);
    if (!nm) throw InputError("libxc has no functional number " + name);
    std::free(nm);
    return id;
  }
  if (name.rfind("xc_", 0) == 0) name = name.substr(3);
  const int id = xc_functional_get_number(name.c_str());
  if (id <= 0) {
    const std::string near = nearest_word(name, all_libxc_names());
    throw InputError("unknown libxc functional '" + raw + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
  }
  return id;
}

const char* family_name(int family) {
  switch (family) {
    case XC_FAMILY_LDA: return "LDA";
    case XC_FAMILY_GGA: return "GGA";
    case XC_FAMILY_MGGA: return "meta-GGA";
    case XC_FAMILY_LCA: return "LCA";
    case XC_FAMILY_OEP: return "OEP";
    case XC_FAMILY_HYB_GGA: return "hybrid GGA";
    case XC_FAMILY_HYB_MGGA: return "hybrid meta-GGA";
    case XC_FAMILY_HYB_LDA: return "hybrid LDA";
    default: return "unknown family";
  }
}

const char* kind_name(int kind) {
  switch (kind) {
    case XC_EXCHANGE: return "exchange";
    case XC_CORRELATION: return "correlation";
    case XC_EXCHANGE_CORRELATION: return "exchange-correlation";
    case XC_KINETIC: return "kinetic";
    default: return "unknown kind";
  }
}

int dimension_of(int flags) { return (flags & XC_FLAGS_1D) ? 1 : (flags & XC_FLAGS_2D) ? 2 : 3; }

// What libxc says of functional `id`, read from an initialised unpolarized instance.
struct LibxcInfo {
  bool ok = false;
  std::string name, description;
  int family = 0, kind = 0, flags = 0;
};

LibxcInfo libxc_info(int id) {
  LibxcInfo r;
  char* nm = xc_functional_get_name(id);
  if (!nm) return r;
  r.name = nm;
  std::free(nm);
  LibxcHandle h(id, XC_UNPOLARIZED);
  if (!h.ok) return r;
  r.ok = true;
  r.description = xc_func_info_get_name(h.f.info);
  r.family = xc_func_info_get_family(h.f.info);
  r.kind = xc_func_info_get_kind(h.f.info);
  r.flags = xc_func_info_get_flags(h.f.info);
  return r;
}

}  // namespace

std::vector<LibxcEntry> libxc_catalog() {
  const int n = xc_number_of_functionals();
  std::vector<int> ids(static_cast<std::size_t>(n));
  xc_available_functional_numbers(ids.data());
  std::sort(ids.begin(), ids.end());
  std::vector<LibxcEntry> out;
  for (int id : ids) {
    const LibxcInfo info = libxc_info(id);
    if (!info.ok) continue;
    LibxcEntry e;
    e.id = id;
    e.name = info.name;
    e.description = info.description;
    e.family = family_name(info.family);
    e.kind = kind_name(info.kind);
    e.dimension = dimension_of(info.flags);
    out.push_back(std::move(e));
  }
  return out;
}

std::string libxc_refusal(int id, bool one_dimensional) {
  if (std::string why = flag_refusal(id, one_dimensional); !why.empty()) return why;
  if (id == XC_LDA_X_1D_SOFT) return {};  // tabulated in soft_exchange_1d, not evaluated by libxc
  XcSettings settings;
  settings.one_dimensional = one_dimensional;
  try {
    (void)make_libxc_term(std::to_string(id), settings);
  } catch (const InputError& e) {
    return e.what();
  }
  return {};
}

namespace {

std::string flag_refusal(int id, bool one_dimensional) {
  const LibxcInfo info = libxc_info(id);
  if (!info.ok) return "libxc has no usable functional number " + std::to_string(id);
  const std::string what = "functional '" + info.name + "' (" + info.description + ")";
  const int family = info.family, kind = info.kind, flags = info.flags;
  if (family != XC_FAMILY_LDA && family != XC_FAMILY_GGA)
    return what + " is a " + family_name(family) +
           "; only LDA and GGA functionals are supported (hybrids, meta-GGAs and orbital functionals are not)";
  if (kind == XC_KINETIC) return what + " is a kinetic-energy functional, not exchange-correlation";
  if (!(flags & XC_FLAGS_HAVE_EXC))
    return what + " defines a potential but no energy (libxc has no Exc for it); the SCF energies, "
                  "the fits and the derivatives all need the energy";
  if (!(flags & XC_FLAGS_HAVE_FXC))
    return what + " has no second derivatives in this libxc; the response and the derivatives need them";
  if (flags & XC_FLAGS_VV10) return what + " has a nonlocal (VV10) correlation part, which is not supported";
  const int dim = dimension_of(flags), want = one_dimensional ? 1 : 3;
  if (dim != want)
    return what + " is a " + std::to_string(dim) + "D functional; " +
           (one_dimensional ? "line systems need a 1D functional (lda_x_1d_soft, lda_c_1d_csc, ...)"
                            : "radial atoms need a 3D functional");
  return {};
}

}  // namespace

std::unique_ptr<XcTerm> make_libxc_term(const std::string& name, const XcSettings& settings) {
  const int id = resolve_libxc_id(name);
  if (id == XC_LDA_X_1D_SOFT) {
    if (const std::string why = flag_refusal(id, settings.one_dimensional); !why.empty()) throw InputError(why);
    if (!(settings.softening > 0)) throw InputError("lda_x_1d_soft needs a positive softening");
    return std::make_unique<SoftExchange1dTerm>(settings.softening);
  }
  return std::make_unique<LibxcTerm>(id, settings);
}

XcFunctional make_functional(const std::vector<std::string>& names, const XcSettings& settings,
                             const std::vector<std::vector<double>>& parameters) {
  XcFunctional f;
  for (std::size_t idx = 0; idx < names.size(); ++idx) {
    const std::string& item = names[idx];
    if (lower(item) == "none") continue;
    double weight = 1.0;
    std::string nm = item;
    if (const auto star = item.find('*'); star != std::string::npos) {
      try {
        std::size_t used = 0;
        weight = std::stod(item.substr(0, star), &used);
      } catch (const std::exception&) {
        throw InputError("cannot read the weight in '" + item + "' (expected e.g. 0.5*gga_x_pbe)");
      }
      nm = item.substr(star + 1);
    }
    const std::vector<double> params = idx < parameters.size() ? parameters[idx] : std::vector<double>{};
    if (nm.rfind("model:", 0) == 0) {
      f.add(make_model_term(nm.substr(6), params, settings), weight);
    } else if (nm.rfind("formula:", 0) == 0) {
      const std::string fname = nm.substr(8);
      std::shared_ptr<const ModelFamily> family;
      std::vector<std::string> known;
      for (const auto& fam : settings.formulas) {
        known.push_back(fam->name());
        if (fam->name() == fname) family = fam;
      }
      if (!family) {
        const std::string near = nearest_word(fname, known);
        throw InputError("no formula named '" + fname + "' (define it in a [formula." + fname + "] table)" +
                         (near.empty() ? "" : "; did you mean '" + near + "'?"));
      }
      f.add(make_model_term(family, params, settings), weight);
    } else if (nm.rfind("callback:", 0) == 0) {
      f.add(make_callback_term(nm.substr(9), params, settings), weight);
    } else {
      if (!params.empty())
        throw InputError("functional '" + nm + "' has no trainable parameters (only model:, formula: and callback: terms do)");
      f.add(make_libxc_term(nm, settings), weight);
    }
  }
  return f;
}

}  // namespace stillpoint
