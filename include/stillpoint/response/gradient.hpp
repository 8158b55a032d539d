#pragma once
// Exact gradients of losses on converged Kohn–Sham outputs with respect to functional and
// external-potential parameters, by implicit differentiation of the SCF fixed point:
//   tangent  (I - K chi0) vdot = dV/dtheta  (one solve per parameter)
//   adjoint  (I - chi0 K) zeta = g_v        (one solve per system, whatever the parameter count)
// Energies use the stationarity shortcut dE/dtheta = dE/dtheta|_n (no solve).
#include <Eigen/Dense>
#include <functional>
#include <limits>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "stillpoint/response/response.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/parallel/communicator.hpp"

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
  /// The input key that chose `index` (empty when built in code), to place errors found later.
  SourceLocation where;
};

/// Finite-difference steps: `relative` * max(|theta|, 1) for potentials, weights and
/// geometry (natural scale 1 in atomic units), `relative` * max(|theta|, 0.1) for model
/// coefficients, which can be small (B88 beta = 0.0042; Richardson extrapolation absorbs the larger relative step),
/// and 50 * `relative` for single-node grid potentials.
Eigen::VectorXd default_fd_steps(const std::vector<ParameterRef>& params, const Eigen::VectorXd& theta, double relative);

/// Current values of the parameters in the systems (the base point of a gradient).
Eigen::VectorXd parameter_values(const std::vector<SystemSpec>& systems, const std::vector<ParameterRef>& params);
/// Systems with the parameters set to theta.
std::vector<SystemSpec> apply_parameters(const std::vector<SystemSpec>& systems, const std::vector<ParameterRef>& params,
                                         const Eigen::VectorXd& theta);

/// dV/dtheta at fixed density for one parameter of the system of `problem`, per spin at every
/// node (hartree per unit of the parameter): the right-hand side of its tangent equation.
std::vector<Eigen::VectorXd> parameter_potential(const KsProblem& problem, const KsSolution& solution,
                                                 const ParameterRef& parameter);
/// dE/dtheta at fixed density, which by stationarity of the Kohn–Sham energy is the total
/// derivative of the converged energy (nuclear repulsion included).
double explicit_energy_derivative(const KsProblem& problem, const KsSolution& solution, const ParameterRef& parameter);

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
  /// The input key that chose `state` (empty when built in code).
  SourceLocation where;
};

struct GradientOptions {
  enum class Mode { Adjoint, Tangent };
  Mode mode = Mode::Adjoint;
  ScfOptions scf;
  ResponseOptions response;
  double density_threshold = 1e-30;
  /// Systems solved and differentiated concurrently (std::thread). Every system is computed
  /// the same way whatever the count and sums are taken in system order, so results are
  /// bitwise identical for any thread count.
  int threads = 1;
  /// The ranks the systems are shared out over (each rank solves its share with `threads`
  /// threads; every rank then holds every result). nullptr: this process alone. Results are
  /// bitwise identical for any number of ranks. Not owned; must outlive the problem.
  const Communicator* communicator = nullptr;
};

struct GradientResult {
  double loss = 0.0;
  Eigen::VectorXd gradient;
  std::vector<double> term_values;  ///< value of every loss term
  /// The quantity q of every term: total energy, energy difference or eigenvalue (hartree),
  /// or for a density term the weighted distance sum_k W_k r_k (n_k - n_ref,k)^2.
  std::vector<double> term_quantities;
  int linear_solves = 0;
  int krylov_iterations = 0;
  /// Largest relative residual of any linear solve. Normally below the Krylov tolerance; a
  /// solve whose restarts stopped improving is accepted up to ResponseOptions::krylov_floor,
  /// and then this says how far the derivative is from exact.
  double max_linear_residual = 0.0;
  double scf_seconds = 0.0;
  double gradient_seconds = 0.0;
};

/// The loss as a residual vector, L = sum_i r_i^2 (every term must be a squared error):
///   energy, energy difference, eigenvalue:  r = sqrt(weight) (q - target)
///   density:  one row per node with W_k r_k > 0,  r_k = sqrt(weight W_k r_k) (n_k - n_ref,k)
/// The Jacobian comes from tangent solves: one per parameter and per system with density or
/// eigenvalue rows gives the columns of all its rows; energies use stationarity.
struct ResidualResult {
  Eigen::VectorXd residuals;
  Eigen::MatrixXd jacobian;  ///< rows x parameters (empty unless requested)
  double loss = 0.0;
  std::vector<double> term_values, term_quantities;
  int linear_solves = 0;
  int krylov_iterations = 0;
  /// Largest relative residual of any linear solve. Normally below the Krylov tolerance; a
  /// solve whose restarts stopped improving is accepted up to ResponseOptions::krylov_floor,
  /// and then this says how far the derivative is from exact.
  double max_linear_residual = 0.0;
  double scf_seconds = 0.0;
  double gradient_seconds = 0.0;
};

/// A set of systems, parameters and loss terms, differentiated at any parameter point.
/// Only systems that some loss term refers to are solved. Every solved system keeps its last
/// converged solution and starts the next SCF from it; when any system fails, all of them
/// keep the state they had before the call (a rejected point leaves no trace).
class GradientProblem {
 public:
  GradientProblem(std::vector<SystemSpec> systems, std::vector<ParameterRef> params, std::vector<LossTerm> loss,
                  GradientOptions options = {});

  const std::vector<ParameterRef>& parameters() const { return params_; }
  const std::vector<SystemSpec>& systems() const { return systems_; }
  Eigen::VectorXd initial_values() const { return parameter_values(systems_, params_); }

  /// Loss and its exact gradient at theta (SCF of every system, then tangent or adjoint).
  GradientResult evaluate(const Eigen::VectorXd& theta);
  /// Loss, term values and quantities without any derivative (gradient left empty).
  GradientResult terms(const Eigen::VectorXd& theta);
  /// Loss only (SCF of every system), with tighter SCF options if given.
  double loss(const Eigen::VectorXd& theta, const ScfOptions* scf = nullptr);
  /// Central finite differences of the whole converged program, step h_p per parameter.
  /// `progress(done, total)` (optional) is called after each component.
  Eigen::VectorXd finite_difference_gradient(const Eigen::VectorXd& theta, const Eigen::VectorXd& steps,
                                             const ScfOptions& tight,
                                             const std::function<void(int, int)>& progress = {});

  /// True when every term is a squared error (has a target, or is a density distance).
  bool residual_form() const;
  /// Number of residual rows, and the loss term each row belongs to.
  int num_residuals() const { return static_cast<int>(row_term_.size()); }
  const std::vector<int>& residual_terms() const { return row_term_; }
  /// Residuals (and their Jacobian) at theta. Throws InputError unless residual_form().
  ResidualResult residuals(const Eigen::VectorXd& theta, bool with_jacobian);

  /// Systems some loss term refers to (the ones that are solved), ascending.
  const std::vector<int>& active_systems() const { return active_; }
  const std::vector<LossTerm>& loss_terms() const { return loss_; }
  void set_threads(int threads) { options_.threads = threads < 1 ? 1 : threads; }
  /// Last converged solution per system (empty for inactive or not yet solved systems).
  const std::vector<KsSolution>& solutions() const { return warm_; }
  /// Replaces the warm-start states (e.g. from a checkpoint); only v_s and warm are used.
  void set_solutions(std::vector<KsSolution> solutions);

 private:
  struct Cache;
  std::shared_ptr<const Cache> solve(const Eigen::VectorXd& theta, const ScfOptions* scf);
  const Communicator& comm() const;

  std::vector<SystemSpec> systems_;
  std::vector<ParameterRef> params_;
  std::vector<LossTerm> loss_;
  GradientOptions options_;
  std::vector<int> active_;
  std::vector<int> row_term_;     // residual row -> loss term
  std::vector<int> row_node_;     // residual row -> mesh node (density rows), else -1
  std::vector<KsSolution> warm_;  // last converged solution per system, for warm starts
  std::shared_ptr<const Cache> cache_;  // the solved systems at the last theta (default SCF options)
  // Measured SCF seconds per active system: the next call's assignment to ranks.
  std::vector<double> scf_cost_;
  std::vector<std::shared_ptr<const Mesh>> meshes_;  // meshes of systems solved by other ranks
};

}  // namespace stillpoint
