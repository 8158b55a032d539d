#pragma once
// Fitting model functionals and external potentials to reference data through the exact
// gradients of the converged SCF (gradient.hpp), with Ceres Solver:
//   L-BFGS on the scalar loss with adjoint gradients (ceres::GradientProblem; bounds by a
//     smooth reparametrization of every bounded parameter);
//   Levenberg–Marquardt on the residual vector with tangent Jacobians (ceres::Problem with
//     parameter bounds).
// The loss is  L(theta) = sum over training terms + regularization (all in "loss units"):
//   squared-error terms  weight_eff * (q - target)^2,  density terms  weight_eff * sum_k W_k (n_k - n_ref,k)^2,
//   L2 priors  lambda (theta - prior)^2,  grid-potential smoothness  lambda sum (v_{k+1} - v_k)^2 / (x_{k+1} - x_k).
// Validation terms are evaluated at every iteration's accepted point and reported; they never
// enter L, its gradient or any decision of the optimizer.
//
// Runs are reproducible: systems are evaluated in parallel threads but reduced in a fixed
// order, and a run resumed from a checkpoint replays the logged evaluations to Ceres
// (bitwise) before it computes anything new, so it ends exactly where an uninterrupted run ends.
#include <Eigen/Dense>
#include <atomic>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "stillpoint/response/gradient.hpp"

namespace stillpoint {

/// What the optimizer needs to know about one free parameter beyond its ParameterRef.
struct FitParameterInfo {
  /// Typical size of the parameter (its unit for the optimizer's variables); > 0.
  double scale = 1.0;
  /// L2 pull lambda (theta - prior)^2 (grid potentials: lambda sum_k w_k (v_k - prior)^2, w = dx weights).
  std::optional<double> prior;
  double prior_weight = 0.0;
  /// Grid potentials: lambda sum (v_{k+1} - v_k)^2 / (x_{k+1} - x_k) over neighbouring free nodes of one block.
  double smoothness = 0.0;
  /// Which [[parameter]] block it came from (smoothness couples nodes of one block only).
  int block = 0;
  /// Mesh position and dx weight of a grid-potential node (bohr), filled by prepare_fit.
  double node_x = 0.0, node_weight = 0.0;
  /// A published value to report beside the fitted one.
  std::optional<double> published;
  std::string published_source;
};

/// Normalization and bookkeeping of one loss term (the LossTerm carries the effective weight).
struct FitTermInfo {
  bool validation = false;
  double user_weight = 1.0;
  /// Error that counts as one loss unit: hartree for energies and eigenvalues, relative L2
  /// distance for densities. 0 when the term is not normalized.
  double scale = 0.0;
  /// weight_eff / user_weight.
  double multiplier = 1.0;
  /// Density terms: sqrt(sum_k W_k r_k n_ref,k^2), the reference norm (electrons / bohr^(d/2)).
  double reference_norm = 0.0;
};

struct FitOptions {
  enum class Optimizer { Lbfgs, LevenbergMarquardt };
  Optimizer optimizer = Optimizer::Lbfgs;
  /// Iteration limit (Ceres max_num_iterations); 0 evaluates and reports the start only.
  int max_iterations = 100;
  /// Ceres stopping tests, each documented in docs/fit.md:
  ///   gradient: max-norm of the (projected) gradient in the optimizer's variables <= gradient_tolerance
  ///   step:     |step| <= (|x| + step_tolerance) * step_tolerance
  ///   loss:     |loss change| / loss <= loss_tolerance
  double gradient_tolerance = 1e-10;
  double step_tolerance = 1e-8;
  double loss_tolerance = 1e-8;
  int lbfgs_rank = 20;
  /// Systems evaluated in parallel; results do not depend on it.
  int threads = 1;
  /// A checkpoint every this many iterations (and on interrupt and at the end).
  int checkpoint_every = 5;
  /// Validation loss every this many iterations (the last one always).
  int validation_every = 1;
  /// Gauss–Newton standard errors and correlations at the optimum (needs residual form).
  bool uncertainties = true;
  int uncertainty_max_parameters = 200;
  /// Condition number of the scaled Gauss–Newton matrix above which a warning is issued.
  double ill_conditioned = 1e10;
};

/// Everything a fit needs; the workflow reader (fit_input.hpp) fills it from a file.
struct FitSpec {
  std::vector<SystemSpec> systems;
  std::vector<ParameterRef> parameters;  ///< free parameters, in optimizer order
  std::vector<FitParameterInfo> info;    ///< one per free parameter
  std::vector<ParameterRef> fixed;       ///< listed but held at their values (reported)
  std::vector<LossTerm> training, validation;
  std::vector<FitTermInfo> training_info, validation_info;
  GradientOptions gradient;  ///< SCF, response and density-threshold settings (mode is set by the optimizer)
  FitOptions options;
};

/// Fills the grid-node positions and weights of grid-potential parameters, and checks the
/// spec (every free parameter must act on a training system; LM needs squared-error terms).
/// Throws InputError naming the parameter or term.
void prepare_fit(FitSpec& spec);

struct FitIteration {
  int iteration = 0;
  double loss = 0.0;           ///< training loss (with regularization), loss units
  double gradient_norm = 0.0;  ///< |dL/dtheta| (2-norm over free parameters, physical units)
  double validation_loss = std::numeric_limits<double>::quiet_NaN();  ///< NaN: not computed
  double seconds = 0.0;        ///< wall time since the start of the fit (over resumes)
  bool step_successful = true;
};

/// The state of every system and term at one parameter point.
struct FitSnapshot {
  Eigen::VectorXd theta;
  double training_loss = 0.0;  ///< data terms + regularization
  double regularization = 0.0;
  double validation_loss = std::numeric_limits<double>::quiet_NaN();
  std::vector<double> training_values, training_quantities;
  std::vector<double> validation_values, validation_quantities;
  /// Converged solution per system (empty for systems no term refers to).
  std::vector<KsSolution> solutions;
};

struct FitUncertainty {
  bool computed = false;
  std::string note;  ///< why not computed, or caveats
  Eigen::VectorXd standard_error;           ///< sqrt(s^2 diag((J^T J)^-1)), s^2 = RSS / (m - p); empty if m <= p
  Eigen::VectorXd standard_error_unscaled;  ///< sqrt(diag((J^T J)^-1)): the scales taken as standard deviations
  Eigen::MatrixXd correlation;
  double condition_number = 0.0;  ///< of the column-scaled J^T J
  int residuals = 0, degrees_of_freedom = 0;
  double residual_variance = 0.0;
  bool ill_conditioned = false;
};

struct FitResult {
  enum class Termination { Converged, IterationLimit, NoFurtherProgress, Interrupted };
  Termination termination = Termination::Converged;
  std::string message;  ///< the optimizer's own reason, with the measured value
  Eigen::VectorXd initial, fitted;
  std::vector<FitIteration> history;
  std::vector<std::string> rejected;  ///< one line per rejected trial point, with the reason
  int evaluations = 0, replayed_evaluations = 0;
  /// Largest relative residual of the linear (tangent or adjoint) solves of the evaluations
  /// made by this run: normally below the Krylov tolerance (GradientResult::max_linear_residual).
  double max_linear_residual = 0.0;
  FitSnapshot before, after;
  FitUncertainty uncertainty;
  std::vector<std::string> warnings;
  double seconds = 0.0;            ///< wall time of the whole fit (over resumes)
  double seconds_per_iteration = 0.0;
};

class FitObserver {
 public:
  virtual ~FitObserver() = default;
  virtual void iteration(const FitIteration&) {}
  /// Rejected steps, resume notices, warnings (one line each, no newline).
  virtual void message(const std::string&) {}
};

struct FitRunOptions {
  /// Checkpoint file (empty: none). Written atomically.
  std::string checkpoint;
  /// Continue from `checkpoint` (InputError if it is missing or belongs to another fit).
  bool resume = false;
  /// Set asynchronously (signal handler) to stop at the end of the current iteration.
  const std::atomic<int>* stop = nullptr;
  FitObserver* observer = nullptr;
  /// The ranks the systems are shared out over (GradientOptions::communicator); every rank
  /// runs the same optimizer on the same numbers and only rank 0 writes the checkpoint.
  /// nullptr: this process alone. Not owned.
  const Communicator* communicator = nullptr;
  /// Test hooks: stop as if interrupted after this many iterations (-1: never); make the SCF
  /// of a trial point fail when the predicate says so.
  int stop_after_iterations = -1;
  std::function<bool(const Eigen::VectorXd&)> inject_failure;
};

/// Runs the fit. InputError for an unusable spec or checkpoint; NumericalError when the start
/// point itself cannot be evaluated. Failed trial points are rejected, logged and skipped.
FitResult run_fit(const FitSpec& spec, const FitRunOptions& run = {});

/// Human-readable name of a termination.
std::string to_string(FitResult::Termination t);

}  // namespace stillpoint
