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

#include "stillpoint/jet.hpp"
#include "stillpoint/xc_functional.hpp"

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
