#pragma once
// Trainable model functionals: an energy density written once in terms of jets, from which
// the potential, the kernel and all parameter derivatives follow exactly (jet.hpp).
//
// A family is one small class: its name, whether it needs density gradients, its parameters
// with defaults, and the energy per volume as a function of the spin densities and gradient
// invariants (n_up, n_down, sigma_uu, sigma_ud, sigma_dd) — unpolarized inputs arrive as
// n_up = n_down = n/2 and sigma_ab = sigma/4, so every family is written spin-resolved once.
// Register it with STILLPOINT_REGISTER_MODEL in its .cpp file.
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include <Eigen/Core>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/jet.hpp"
#include "stillpoint/xc/functional.hpp"

namespace stillpoint {

class ModelFamily {
 public:
  virtual ~ModelFamily() = default;
  virtual std::string name() const = 0;
  virtual bool needs_gradient() const = 0;
  /// true for families defined only for the 1D soft-Coulomb line.
  virtual bool one_dimensional() const { return false; }
  virtual std::vector<std::string> parameter_names() const = 0;
  virtual std::vector<double> default_parameters() const = 0;
  /// Energy per volume (hartree / bohr^d).
  virtual Jet energy(const Jet& n_up, const Jet& n_down, const Jet& s_uu, const Jet& s_ud, const Jet& s_dd,
                     const std::vector<Jet>& params, const XcSettings& settings) const = 0;
  /// How the family is named in xc lists ("model:<name>", "formula:<name>").
  virtual std::string label() const { return "model:" + name(); }
  /// The family's input variables at a point ("n_up = ..., n_down = ..."), for error messages.
  virtual std::string describe_point(double n_up, double n_down, double s_uu, double s_ud, double s_dd,
                                     const XcSettings& settings) const;
};

/// A model or formula term whose energy density or one of its derivatives is not finite at a
/// point above the density threshold. The term cannot know where the point lies, so the
/// mesh-aware caller adds the coordinate (with_position); `rho` identifies the point.
class NonFiniteModelError : public NumericalError {
 public:
  NonFiniteModelError(const std::string& head, const std::string& tail, std::vector<double> rho);
  const std::vector<double>& rho() const noexcept { return rho_; }
  /// The same error with "at x = ... bohr" (or r) of the first mesh node carrying `rho`.
  NonFiniteModelError with_position(const class Mesh& mesh, const std::vector<Eigen::VectorXd>& density) const;

 private:
  std::string head_, tail_;
  std::vector<double> rho_;
};

using ModelFactory = std::function<std::unique_ptr<ModelFamily>()>;
/// Registers a family under `name` (used as "model:<name>" in xc lists). Returns true.
bool register_model_family(const std::string& name, ModelFactory factory);
std::vector<std::string> model_family_names();

/// An XcTerm evaluating a family with given parameters (defaults when `params` is empty).
std::unique_ptr<XcTerm> make_model_term(const std::string& family, const std::vector<double>& params,
                                        const XcSettings& settings);
/// An XcTerm from any ModelFamily object (used by user formulas).
std::unique_ptr<XcTerm> make_model_term(std::shared_ptr<const ModelFamily> family, const std::vector<double>& params,
                                        const XcSettings& settings);

#define STILLPOINT_REGISTER_MODEL(NAME, CLASS)                                                        \
  namespace {                                                                                        \
  const bool registered_##CLASS = ::stillpoint::register_model_family(                               \
      NAME, [] { return std::unique_ptr<::stillpoint::ModelFamily>(std::make_unique<CLASS>()); }); \
  }

}  // namespace stillpoint
