#pragma once
// Exact gradients of losses on converged Kohn–Sham outputs with respect to functional and
// external-potential parameters, by implicit differentiation of the SCF fixed point:
//   tangent  (I - K chi0) vdot = dV/dtheta  (one solve per parameter)
//   adjoint  (I - chi0 K) zeta = g_v        (one solve per system, whatever the parameter count)
// Energies use the stationarity shortcut dE/dtheta = dE/dtheta|_n (no solve).
#include <Eigen/Dense>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "stillpoint/response.hpp"
#include "stillpoint/scf.hpp"

namespace stillpoint {

/// One named scalar parameter acting on one system (or on all, system = -1).
struct ParameterRef {
  enum class Kind {
    XcWeight,       ///< weight of xc term `index`
    Gaussian,       ///< field depth | center | width of line potential `index` (a gaussian)
    Harmonic,       ///< field omega | center of line potential `index` (harmonic)
    Nucleus,        ///< field charge | position | softening of line nucleus `index`
    GridPotential,  ///< value of the extra nodal potential at mesh node `index` (line)
    XcParameter,    ///< parameter `sub` (named `field`) of model xc term `index`
  };
  Kind kind = Kind::XcWeight;
  int system = -1;
  int index = 0;
  int sub = 0;
  std::string field;
  std::string name;
  double lower = -std::numeric_limits<double>::infinity();
  double upper = std::numeric_limits<double>::infinity();
};

/// Finite-difference steps: `relative` * max(|theta|, 1) for potentials, weights and
/// geometry (natural scale 1 in atomic units), `relative` * max(|theta|, 0.1) for model
/// coefficients, which can be small (B88 beta = 0.0042; Richardson extrapolation absorbs the larger relative step).
Eigen::VectorXd default_fd_steps(const std::vector<ParameterRef>& params, const Eigen::VectorXd& theta, double relative);

/// Current values of the parameters in the systems (the base point of a gradient).
Eigen::VectorXd parameter_values(const std::vector<SystemSpec>& systems, const std::vector<ParameterRef>& params);
/// Systems with the parameters set to theta.
std::vector<SystemSpec> apply_parameters(const std::vector<SystemSpec>& systems, const std::vector<ParameterRef>& params,
                                         const Eigen::VectorXd& theta);

struct LossTerm {
  enum class Kind { Density, Energy, Eigenvalue, EnergyDifference };
  Kind kind = Kind::Energy;
  int system = 0;
  int system_b = -1;  ///< EnergyDifference: E(system) - E(system_b)
  /// Eigenvalue: state label ("1s", "2p", "3") or "homo" / "lumo"; spin 0/1 (ignored when unpolarized).
  std::string state;
  int spin = 0;
  /// Squared error weight*(q - target)^2 when set, else the linear weight*q.
  std::optional<double> target;
  double weight = 1.0;
  /// Density: reference total density at every mesh node, and a 0/1 (or any) regional weight.
  std::vector<double> reference;
  std::vector<double> region;
  std::string name;
};

struct GradientOptions {
  enum class Mode { Adjoint, Tangent };
  Mode mode = Mode::Adjoint;
  ScfOptions scf;
  ResponseOptions response;
  double density_threshold = 1e-30;
};

struct GradientResult {
  double loss = 0.0;
  Eigen::VectorXd gradient;
  std::vector<double> term_values;  ///< value of every loss term
  int linear_solves = 0;
  int krylov_iterations = 0;
  double scf_seconds = 0.0;
  double gradient_seconds = 0.0;
};

/// A set of systems, parameters and loss terms, differentiated at any parameter point.
class GradientProblem {
 public:
  GradientProblem(std::vector<SystemSpec> systems, std::vector<ParameterRef> params, std::vector<LossTerm> loss,
                  GradientOptions options = {});

  const std::vector<ParameterRef>& parameters() const { return params_; }
  const std::vector<SystemSpec>& systems() const { return systems_; }
  Eigen::VectorXd initial_values() const { return parameter_values(systems_, params_); }

  /// Loss and its exact gradient at theta (SCF of every system, then tangent or adjoint).
  GradientResult evaluate(const Eigen::VectorXd& theta);
  /// Loss only (SCF of every system), with tighter SCF options if given.
  double loss(const Eigen::VectorXd& theta, const ScfOptions* scf = nullptr);
  /// Central finite differences of the whole converged program, step h_p per parameter.
  Eigen::VectorXd finite_difference_gradient(const Eigen::VectorXd& theta, const Eigen::VectorXd& steps,
                                             const ScfOptions& tight);

 private:
  std::vector<SystemSpec> systems_;
  std::vector<ParameterRef> params_;
  std::vector<LossTerm> loss_;
  GradientOptions options_;
  std::vector<KsSolution> warm_;  // last converged solution per system, for warm starts
};

}  // namespace stillpoint
