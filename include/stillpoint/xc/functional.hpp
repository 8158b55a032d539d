#pragma once
// Exchange-correlation functionals as weighted sums of terms evaluated point by point.
//
// Every term returns the energy per volume e (not per particle) and its derivatives with
// respect to the spin densities and the gradient invariants, in libxc's point-major layout:
//   rho   (n) or (n_up, n_down)
//   sigma (|n'|^2) or (n_up'^2, n_up' n_down', n_down'^2)
// so that the discrete energy on a mesh is sum_q w_q e_q, and potentials and kernels follow
// from these exact derivatives (see xc_on_mesh.hpp). A weight vector in front of the terms
// makes linear mixtures of functionals one parametrized family.
#include <cstddef>
#include <memory>
#include <string>
#include <vector>

namespace stillpoint {

struct XcPointData {
  int nspin = 1;
  std::size_t np = 0;
  std::vector<double> rho;    ///< np * nspin
  std::vector<double> sigma;  ///< np * (nspin == 1 ? 1 : 3); may be empty for LDA-only functionals
};

struct XcDerivatives {
  std::vector<double> e;           ///< np, energy per volume
  std::vector<double> vrho;        ///< np * nspin
  std::vector<double> vsigma;      ///< np * nsigma
  std::vector<double> v2rho2;      ///< np * (nspin == 1 ? 1 : 3), order >= 2
  std::vector<double> v2rhosigma;  ///< np * (nspin == 1 ? 1 : 6), order >= 2
  std::vector<double> v2sigma2;    ///< np * (nspin == 1 ? 1 : 6), order >= 2
  /// Zero-filled storage for np points up to derivative order `order` (1 or 2).
  void reset(int nspin, std::size_t np, bool gradient, int order);
};

/// Settings that every term needs to know when it is created.
class ModelFamily;

struct XcSettings {
  /// Points whose total density is below this are dropped (e = v = 0) by every term, so the
  /// discrete functional is one smooth function. 1e-30 converges unoccupied minority-spin LSD
  /// levels; libxc's own cut-offs (1e-15 and up) shift them by up to 6e-6 hartree.
  double density_threshold = 1e-30;
  /// Softening a of the 1D soft-Coulomb interaction 1/sqrt(u^2 + a^2) (1D functionals only).
  double softening = 1.0;
  /// true for the 1D line geometry; 1D libxc functionals are refused on radial atoms.
  bool one_dimensional = false;
  /// User formulas ("formula:<name>" in xc lists), compiled (formula.hpp).
  std::vector<std::shared_ptr<const ModelFamily>> formulas;
};

class XcTerm {
 public:
  virtual ~XcTerm() = default;
  virtual std::string name() const = 0;
  virtual bool needs_gradient() const = 0;
  /// Adds weight * (e and its derivatives up to `order`) into `out`, which has been reset by the caller.
  virtual void accumulate(const XcPointData& in, double weight, int order, XcDerivatives& out) const = 0;

  /// Total density (bohr^-3 or bohr^-1) below which the term is smoothly switched off because
  /// its potential diverges in exponentially decaying tails; 0 when it is never switched off.
  virtual double tail_cut() const { return 0.0; }
  /// Density above which the tail switch leaves the term untouched (0 when there is no cut).
  virtual double tail_on() const { return 0.0; }
  /// Non-empty when the term cannot serve a spin-polarized system with electrons of both spins
  /// in unequal numbers, with the reason (a minority-spin potential that diverges as the spin
  /// polarization approaches 1).
  virtual std::string open_shell_refusal() const { return {}; }

  // Trainable terms (model families, user formulas) expose their parameters; libxc terms have none.
  virtual std::vector<std::string> parameter_names() const { return {}; }
  virtual std::vector<double> parameters() const { return {}; }
  /// A copy of this term with other parameter values.
  virtual std::unique_ptr<XcTerm> with_parameters(const std::vector<double>&) const { return nullptr; }
  /// Per point: d e / d theta_p (np), d vrho / d theta_p (np * nspin), d vsigma / d theta_p
  /// (np * nsigma, GGA only), libxc layout, unweighted.
  virtual void parameter_derivatives(const XcPointData& in, int p, std::vector<double>& de, std::vector<double>& dvrho,
                                     std::vector<double>& dvsigma) const {
    (void)in, (void)p, (void)de, (void)dvrho, (void)dvsigma;
  }
};

class XcFunctional {
 public:
  XcFunctional() = default;
  void add(std::unique_ptr<XcTerm> term, double weight = 1.0);
  bool empty() const { return terms_.empty(); }
  bool needs_gradient() const;
  std::size_t size() const { return terms_.size(); }
  const XcTerm& term(std::size_t i) const { return *terms_[i]; }
  double weight(std::size_t i) const { return weights_[i]; }
  void set_weight(std::size_t i, double w) { weights_[i] = w; }
  /// Replaces term i (same weight), e.g. with other parameter values.
  void replace(std::size_t i, std::unique_ptr<XcTerm> term) { terms_[i] = std::move(term); }
  /// "lda_x + lda_c_vwn" (weights shown when they are not 1).
  std::string describe() const;
  void evaluate(const XcPointData& in, int order, XcDerivatives& out) const;

 private:
  std::vector<std::shared_ptr<const XcTerm>> terms_;
  std::vector<double> weights_;
};

/// One functional of the installed libxc, as libxc describes it.
struct LibxcEntry {
  int id = 0;
  std::string name;         ///< libxc's short name, e.g. "gga_x_b88"
  std::string description;  ///< libxc's long name, e.g. "Becke 88"
  std::string family;       ///< "LDA", "GGA", "hybrid GGA", "meta-GGA", ...
  std::string kind;         ///< "exchange", "correlation", "exchange-correlation", "kinetic"
  int dimension = 3;        ///< 1, 2 or 3 (libxc's dimensionality flags)
};

/// Every functional of the installed libxc, by increasing number.
std::vector<LibxcEntry> libxc_catalog();

/// Why libxc functional `id` cannot be an exchange-correlation term of a system (empty when
/// it can): not LDA/GGA (hybrids, meta-GGAs), kinetic-energy functionals, potential-only
/// functionals without an energy, no second derivatives, nonlocal (VV10) parts, or a
/// dimension other than the system's (1 on the line, 3 for atoms). The one rule that both
/// the input readers and the functional survey apply.
std::string libxc_refusal(int id, bool one_dimensional);

/// A libxc functional by name ("lda_x", "XC_GGA_X_PBE", "gga_x_pbe") or number ("1").
/// Throws InputError for unknown names (with the nearest valid one) and for every
/// functional libxc_refusal() refuses, with its reason.
std::unique_ptr<XcTerm> make_libxc_term(const std::string& name, const XcSettings& settings);

/// The functional named by a list such as {"lda_x", "lda_c_vwn"}; an empty list or {"none"}
/// gives no exchange-correlation (Hartree only). A number in front of a name with '*'
/// ("0.5*gga_x_pbe") sets the term's weight.
/// "model:<family>" names a trainable model family (model_functional.hpp), "callback:<name>" a
/// registered callback (callback_term.hpp); `parameters`
/// (one list per term, empty = defaults) sets their parameters.
XcFunctional make_functional(const std::vector<std::string>& names, const XcSettings& settings,
                             const std::vector<std::vector<double>>& parameters = {});

}  // namespace stillpoint
