#include "stillpoint/xc_functional.hpp"

#include <xc.h>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdlib>
#include <sstream>

#include "stillpoint/errors.hpp"
#include "stillpoint/model_functional.hpp"
#include "stillpoint/soft_exchange_1d.hpp"

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
    const xc_func_info_type* info = unpol_.f.info;
    family_ = xc_func_info_get_family(info);
    kind_ = xc_func_info_get_kind(info);
    char* nm = xc_functional_get_name(id);
    name_ = nm ? nm : std::to_string(id);
    std::free(nm);
    if (family_ != XC_FAMILY_LDA && family_ != XC_FAMILY_GGA)
      throw InputError("functional '" + name_ +
                       "' is not a plain LDA or GGA (hybrids, meta-GGAs and others are not supported)");
    if (kind_ == XC_KINETIC) throw InputError("functional '" + name_ + "' is a kinetic-energy functional, not exchange-correlation");
    const int flags = xc_func_info_get_flags(info);
    if (!(flags & XC_FLAGS_HAVE_FXC)) throw InputError("functional '" + name_ + "' has no second derivatives in this libxc");
    const bool is1d = (flags & XC_FLAGS_1D) != 0;
    if (is1d && !settings.one_dimensional)
      throw InputError("functional '" + name_ + "' is a 1D functional; it cannot be used for a radial atom");
    double thr = settings.density_threshold;
    // PBE-type correlation returns NaN below ~1.4e-27 in libxc 5.2.3.
    if (family_ == XC_FAMILY_GGA && kind_ != XC_EXCHANGE) thr = std::max(thr, 1e-26);
    threshold_ = thr;
    for (LibxcHandle* h : {&unpol_, &pol_}) {
      xc_func_set_dens_threshold(&h->f, thr);
      if (is1d) configure_1d(h->f, settings.softening);
    }
  }

  std::string name() const override { return name_; }
  bool needs_gradient() const override { return family_ == XC_FAMILY_GGA; }

  void accumulate(const XcPointData& in, double weight, int order, XcDerivatives& out) const override {
    if (in.np == 0 || weight == 0.0) return;
    if (in.nspin == 1)
      unpolarized(in, weight, order, out);
    else if (kind_ == XC_EXCHANGE)
      spin_scaled(in, weight, order, out);
    else
      polarized(in, weight, order, out);
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

  // Non-finite values can only come from points libxc should have screened; they would
  // poison the SCF, so they are dropped like screened points.
  static double finite(double v) { return std::isfinite(v) ? v : 0.0; }
  bool gga() const { return family_ == XC_FAMILY_GGA; }

  void unpolarized(const XcPointData& in, double w, int order, XcDerivatives& out) const {
    Buffers b(in.np, 1, order);
    eval(unpol_.f, in.np, in.rho.data(), in.sigma.data(), order, b);
    for (std::size_t i = 0; i < in.np; ++i) {
      out.e[i] += w * finite(b.zk[i] * in.rho[i]);
      out.vrho[i] += w * finite(b.vrho[i]);
      if (gga()) out.vsigma[i] += w * finite(b.vsigma[i]);
      if (order >= 2) {
        out.v2rho2[i] += w * finite(b.v2rho2[i]);
        if (gga()) {
          out.v2rhosigma[i] += w * finite(b.v2rhosigma[i]);
          out.v2sigma2[i] += w * finite(b.v2sigma2[i]);
        }
      }
    }
  }

  // E_x[n_up, n_dn] = E_x[2 n_up]/2 + E_x[2 n_dn]/2 with unpolarized calls: exact for exchange and
  // free of libxc's erratic polarized GGA exchange near full polarization.
  void spin_scaled(const XcPointData& in, double w, int order, XcDerivatives& out) const {
    const std::size_t np = in.np;
    std::vector<double> rho(2 * np), sigma(gga() ? 2 * np : 0);
    for (std::size_t i = 0; i < np; ++i) {
      rho[i] = 2.0 * in.rho[2 * i];
      rho[np + i] = 2.0 * in.rho[2 * i + 1];
      if (gga()) {
        sigma[i] = 4.0 * in.sigma[3 * i];
        sigma[np + i] = 4.0 * in.sigma[3 * i + 2];
      }
    }
    Buffers b(2 * np, 1, order);
    eval(unpol_.f, 2 * np, rho.data(), gga() ? sigma.data() : nullptr, order, b);
    for (std::size_t i = 0; i < np; ++i) {
      for (int s = 0; s < 2; ++s) {
        const std::size_t j = s * np + i;
        if (rho[j] <= threshold_) continue;
        out.e[i] += w * 0.5 * finite(b.zk[j] * rho[j]);
        out.vrho[2 * i + s] += w * finite(b.vrho[j]);
        if (gga()) out.vsigma[3 * i + 2 * s] += w * 2.0 * finite(b.vsigma[j]);
        if (order >= 2) {
          out.v2rho2[3 * i + 2 * s] += w * 2.0 * finite(b.v2rho2[j]);
          if (gga()) {
            out.v2rhosigma[6 * i + 5 * s] += w * 4.0 * finite(b.v2rhosigma[j]);
            out.v2sigma2[6 * i + 5 * s] += w * 8.0 * finite(b.v2sigma2[j]);
          }
        }
      }
    }
  }

  void polarized(const XcPointData& in, double w, int order, XcDerivatives& out) const {
    const std::size_t np = in.np;
    std::vector<double> rho(in.rho), sigma(in.sigma);
    std::vector<char> zero_spin(2 * np, 0);
    // A vanishing spin density is passed as exactly zero: libxc's clamping of tiny spin
    // densities produces spurious correlation potentials otherwise.
    for (std::size_t i = 0; i < np; ++i) {
      const double tot = rho[2 * i] + rho[2 * i + 1];
      for (int s = 0; s < 2; ++s)
        if (rho[2 * i + s] < 1e-14 * tot) {
          rho[2 * i + s] = 0.0;
          zero_spin[2 * i + s] = 1;
          if (gga()) {
            sigma[3 * i + 2 * s] = 0.0;
            sigma[3 * i + 1] = 0.0;
          }
        }
    }
    Buffers b(np, 2, order);
    eval(pol_.f, np, rho.data(), gga() ? sigma.data() : nullptr, order, b);
    for (std::size_t i = 0; i < np; ++i) {
      const double tot = rho[2 * i] + rho[2 * i + 1];
      out.e[i] += w * finite(b.zk[i] * tot);
      // The potential of a vanishing spin is libxc's smooth fully polarized limit (it is what an
      // empty minority level feels in the tail); only second derivatives are masked below.
      for (int s = 0; s < 2; ++s) out.vrho[2 * i + s] += w * finite(b.vrho[2 * i + s]);
      if (gga())
        for (int k = 0; k < 3; ++k) out.vsigma[3 * i + k] += w * finite(b.vsigma[3 * i + k]);
      if (order >= 2) {
        for (int k = 0; k < 3; ++k) {
          // Minority second derivatives at zero spin density can be ~1e9; they multiply a
          // response that is identically zero, so mask them.
          const bool masked = (k == 0 && zero_spin[2 * i]) || (k == 2 && zero_spin[2 * i + 1]) ||
                              (k == 1 && (zero_spin[2 * i] || zero_spin[2 * i + 1]));
          out.v2rho2[3 * i + k] += w * (masked ? 0.0 : finite(b.v2rho2[3 * i + k]));
        }
        if (gga())
          for (int k = 0; k < 6; ++k) {
            out.v2rhosigma[6 * i + k] += w * finite(b.v2rhosigma[6 * i + k]);
            out.v2sigma2[6 * i + k] += w * finite(b.v2sigma2[6 * i + k]);
          }
      }
    }
  }

  int id_;
  LibxcHandle unpol_, pol_;
  int family_ = 0, kind_ = 0;
  double threshold_ = 0;
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

}  // namespace

std::unique_ptr<XcTerm> make_libxc_term(const std::string& name, const XcSettings& settings) {
  const int id = resolve_libxc_id(name);
  if (id == XC_LDA_X_1D_SOFT) {
    if (!settings.one_dimensional)
      throw InputError("functional 'lda_x_1d_soft' is a 1D functional; it cannot be used for a radial atom");
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
    } else {
      if (!params.empty()) throw InputError("functional '" + nm + "' has no trainable parameters (only model: terms do)");
      f.add(make_libxc_term(nm, settings), weight);
    }
  }
  return f;
}

}  // namespace stillpoint
