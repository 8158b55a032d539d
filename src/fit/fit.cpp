// The fit engine: Ceres L-BFGS / Levenberg–Marquardt over GradientProblem, with an
// evaluation log that makes checkpoints exact (see fit.hpp).
#include "stillpoint/fit/fit.hpp"

#include <ceres/ceres.h>
#include <glog/logging.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <fstream>
#include <memory>
#include <sstream>

#include "fit/checkpoint.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

std::string to_string(FitResult::Termination t) {
  switch (t) {
    case FitResult::Termination::Converged:
      return "converged";
    case FitResult::Termination::IterationLimit:
      return "iteration limit reached";
    case FitResult::Termination::NoFurtherProgress:
      return "no further progress";
    case FitResult::Termination::Interrupted:
      return "interrupted";
  }
  return "?";
}

namespace {

using Clock = std::chrono::steady_clock;

bool acts_on(const ParameterRef& p, int system) { return p.system < 0 || p.system == system; }

// ---------------------------------------------------------------------------------------
// Bounds for L-BFGS: theta = g(u) with u unconstrained, scaled so that dtheta/du = s (the
// parameter's scale) away from the bounds:
//   none:  theta = s u
//   lower: theta = lo + s softplus(u)          upper: theta = hi - s softplus(-u)
//   both:  theta = lo + (hi - lo) sigmoid(4 s u / (hi - lo))
struct BoundMap {
  enum class Kind { None, Lower, Upper, Both };
  std::vector<Kind> kind;
  std::vector<double> lo, hi, s;

  static double softplus(double u) { return u > 0 ? u + std::log1p(std::exp(-u)) : std::log1p(std::exp(u)); }
  static double sigmoid(double u) {
    if (u >= 0) return 1.0 / (1.0 + std::exp(-u));
    const double e = std::exp(u);
    return e / (1.0 + e);
  }
  static double softplus_inverse(double y) { return y + std::log(-std::expm1(-y)); }  // y > 0

  BoundMap(const std::vector<ParameterRef>& params, const std::vector<FitParameterInfo>& info) {
    for (std::size_t i = 0; i < params.size(); ++i) {
      const bool l = std::isfinite(params[i].lower), h = std::isfinite(params[i].upper);
      kind.push_back(l && h ? Kind::Both : l ? Kind::Lower : h ? Kind::Upper : Kind::None);
      lo.push_back(params[i].lower);
      hi.push_back(params[i].upper);
      s.push_back(info[i].scale);
    }
  }
  int size() const { return static_cast<int>(kind.size()); }
  Eigen::VectorXd theta(const double* u) const {
    Eigen::VectorXd t(size());
    for (int i = 0; i < size(); ++i) {
      switch (kind[i]) {
        case Kind::None:
          t(i) = s[i] * u[i];
          break;
        case Kind::Lower:
          t(i) = lo[i] + s[i] * softplus(u[i]);
          break;
        case Kind::Upper:
          t(i) = hi[i] - s[i] * softplus(-u[i]);
          break;
        case Kind::Both:
          t(i) = lo[i] + (hi[i] - lo[i]) * sigmoid(4.0 * s[i] * u[i] / (hi[i] - lo[i]));
          break;
      }
    }
    return t;
  }
  Eigen::VectorXd derivative(const double* u) const {
    Eigen::VectorXd d(size());
    for (int i = 0; i < size(); ++i) {
      switch (kind[i]) {
        case Kind::None:
          d(i) = s[i];
          break;
        case Kind::Lower:
          d(i) = s[i] * sigmoid(u[i]);
          break;
        case Kind::Upper:
          d(i) = s[i] * sigmoid(-u[i]);
          break;
        case Kind::Both: {
          const double a = 4.0 * s[i] / (hi[i] - lo[i]), q = sigmoid(a * u[i]);
          d(i) = (hi[i] - lo[i]) * a * q * (1.0 - q);
          break;
        }
      }
    }
    return d;
  }
  // Inverse map; InputError for a start on a bound (the reparametrization cannot reach it).
  std::vector<double> start(const Eigen::VectorXd& t, const std::vector<ParameterRef>& params) const {
    std::vector<double> u(size());
    for (int i = 0; i < size(); ++i) {
      const bool on_bound = (kind[i] != Kind::None && kind[i] != Kind::Upper && t(i) <= lo[i]) ||
                            (kind[i] != Kind::None && kind[i] != Kind::Lower && t(i) >= hi[i]);
      if (on_bound)
        throw InputError("parameter '" + params[i].name +
                         "' starts on one of its bounds; L-BFGS treats bounds by a reparametrization that needs a "
                         "start strictly inside them (move the initial value, or use levenberg_marquardt)");
      switch (kind[i]) {
        case Kind::None:
          u[i] = t(i) / s[i];
          break;
        case Kind::Lower:
          u[i] = softplus_inverse((t(i) - lo[i]) / s[i]);
          break;
        case Kind::Upper:
          u[i] = -softplus_inverse((hi[i] - t(i)) / s[i]);
          break;
        case Kind::Both: {
          const double q = (t(i) - lo[i]) / (hi[i] - lo[i]);
          u[i] = std::log(q / (1.0 - q)) * (hi[i] - lo[i]) / (4.0 * s[i]);
          break;
        }
      }
    }
    return u;
  }
};

// ---------------------------------------------------------------------------------------
// Regularization as residual rows r = a_i theta_i + a_j theta_j - c (L_reg = sum r^2).
struct RegRow {
  int i = -1, j = -1;
  double ai = 0.0, aj = 0.0, c = 0.0;
};

std::vector<RegRow> regularization_rows(const FitSpec& spec) {
  std::vector<RegRow> rows;
  const auto& P = spec.parameters;
  for (std::size_t i = 0; i < P.size(); ++i) {
    const FitParameterInfo& in = spec.info[i];
    if (in.prior && in.prior_weight > 0) {
      const bool grid = P[i].kind == ParameterRef::Kind::GridPotential;
      const double a = std::sqrt(in.prior_weight * (grid ? in.node_weight : 1.0));
      rows.push_back({static_cast<int>(i), -1, a, 0.0, a * *in.prior});
    }
  }
  for (std::size_t i = 0; i + 1 < P.size(); ++i) {
    const FitParameterInfo& a = spec.info[i];
    const FitParameterInfo& b = spec.info[i + 1];
    if (P[i].kind != ParameterRef::Kind::GridPotential || P[i + 1].kind != ParameterRef::Kind::GridPotential) continue;
    if (a.block != b.block || P[i + 1].index != P[i].index + 1 || a.smoothness <= 0) continue;
    const double k = std::sqrt(a.smoothness / (b.node_x - a.node_x));
    rows.push_back({static_cast<int>(i), static_cast<int>(i + 1), -k, k, 0.0});
  }
  return rows;
}

struct Regularization {
  std::vector<RegRow> rows;
  int p = 0;
  Eigen::VectorXd residuals(const Eigen::VectorXd& t) const {
    Eigen::VectorXd r(rows.size());
    for (std::size_t k = 0; k < rows.size(); ++k) {
      const RegRow& w = rows[k];
      r(k) = w.ai * t(w.i) + (w.j >= 0 ? w.aj * t(w.j) : 0.0) - w.c;
    }
    return r;
  }
  Eigen::MatrixXd jacobian() const {
    Eigen::MatrixXd J = Eigen::MatrixXd::Zero(static_cast<Eigen::Index>(rows.size()), p);
    for (std::size_t k = 0; k < rows.size(); ++k) {
      J(k, rows[k].i) += rows[k].ai;
      if (rows[k].j >= 0) J(k, rows[k].j) += rows[k].aj;
    }
    return J;
  }
  double value(const Eigen::VectorXd& t) const { return residuals(t).squaredNorm(); }
  Eigen::VectorXd gradient(const Eigen::VectorXd& t) const { return 2.0 * jacobian().transpose() * residuals(t); }
};

bool same_bits(const Eigen::VectorXd& a, const Eigen::VectorXd& b) {
  return a.size() == b.size() && std::memcmp(a.data(), b.data(), sizeof(double) * a.size()) == 0;
}

// ---------------------------------------------------------------------------------------
class Engine {
 public:
  Engine(const FitSpec& spec, const FitRunOptions& run)
      : spec_(spec), run_(run), t0_(Clock::now()) {
    GradientOptions g = spec.gradient;
    g.threads = spec.options.threads;
    g.communicator = run.communicator;
    g.mode = spec.options.optimizer == FitOptions::Optimizer::Lbfgs ? GradientOptions::Mode::Adjoint
                                                                      : GradientOptions::Mode::Tangent;
    train_ = std::make_unique<GradientProblem>(spec.systems, spec.parameters, spec.training, g);
    if (!spec.validation.empty())
      valid_ = std::make_unique<GradientProblem>(spec.systems, spec.parameters, spec.validation, g);
    reg_.rows = regularization_rows(spec);
    reg_.p = static_cast<int>(spec.parameters.size());
    state_.fingerprint = fit_fingerprint(spec);
  }

  FitResult run();

  // Ceres adapters call these.
  bool lbfgs(const double* u, double* cost, double* grad) const;
  bool lm(const double* x, double* residuals, double* jacobian) const;
  ceres::CallbackReturnType iteration(const ceres::IterationSummary& s, const Eigen::VectorXd& theta) const;

  int num_residuals() const { return train_->num_residuals() + static_cast<int>(reg_.rows.size()); }
  const BoundMap& map() const { return *map_; }

 private:
  const FitLogEntry* replay(FitLogEntry::Type type, const Eigen::VectorXd& theta) const;
  void ensure_restored() const;
  void reject(const Eigen::VectorXd& theta, const std::string& reason) const;
  /// `states`: the warm starts to store instead of the current ones (the final checkpoint
  /// stores those the re-evaluation at the optimum starts from).
  void write_checkpoint(const std::pair<std::vector<KsSolution>, std::vector<KsSolution>>* states = nullptr) const;
  FitSnapshot snapshot(const Eigen::VectorXd& theta, bool with_jacobian, Eigen::MatrixXd* jacobian,
                       Eigen::VectorXd* residuals);
  void uncertainty(FitResult& res, const Eigen::MatrixXd& J, const Eigen::VectorXd& r) const;
  const Communicator& comm() const { return run_.communicator ? *run_.communicator : serial_communicator(); }
  // A signal reaches the ranks at different moments; they agree on it where all of them
  // ask (the optimizer runs in lockstep on every rank), so all stop at the same iteration.
  bool stop_requested() const {
    const bool mine = run_.stop && run_.stop->load();
    if (comm().size() == 1) return mine;
    for (const std::string& r : comm().all_gather(std::string(1, mine ? '1' : '0')))
      if (r == "1") return true;
    return false;
  }
  double elapsed() const { return state_.seconds_before + std::chrono::duration<double>(Clock::now() - t0_).count(); }
  void message(const std::string& m) const {
    if (run_.observer) run_.observer->message(m);
  }

  const FitSpec& spec_;
  const FitRunOptions& run_;
  Clock::time_point t0_;
  std::unique_ptr<GradientProblem> train_, valid_;
  Regularization reg_;
  std::unique_ptr<BoundMap> map_;
  // Mutable: Ceres calls const members.
  mutable FitCheckpointState state_;
  mutable FitCheckpointState replay_;  // loaded on resume
  mutable std::size_t replay_eval_ = 0, replay_iter_ = 0;
  mutable bool restored_ = true;
  mutable bool interrupted_ = false;
  mutable int evaluations_ = 0, replayed_ = 0;
  mutable double max_linear_residual_ = 0.0;  // over the evaluations of this run (not replayed ones)
  mutable std::vector<FitIteration> history_;
  int iteration_offset_ = 0, restarts_ = 0;  // L-BFGS restarts continue the iteration count
};

const FitLogEntry* Engine::replay(FitLogEntry::Type type, const Eigen::VectorXd& theta) const {
  if (replay_eval_ >= replay_.log.size()) return nullptr;
  const FitLogEntry& e = replay_.log[replay_eval_];
  if (e.type != type || !same_bits(e.theta, theta))
    throw InputError("the checkpoint " + run_.checkpoint + " does not match this run (evaluation " +
                     std::to_string(replay_eval_ + 1) +
                     " differs); it was written by another version or workflow: delete it or run without --resume");
  ++replay_eval_;
  ++replayed_;
  state_.log.push_back(e);
  return &state_.log.back();
}

void Engine::ensure_restored() const {
  if (restored_) return;
  restored_ = true;
  train_->set_solutions(replay_.train_states);
  if (valid_) valid_->set_solutions(replay_.valid_states);
  message("resumed: replayed " + std::to_string(replayed_) + " evaluations and " + std::to_string(replay_iter_) +
          " iterations from the checkpoint");
}

void Engine::reject(const Eigen::VectorXd& theta, const std::string& reason) const {
  std::ostringstream m;
  m << "rejected trial point (evaluation " << state_.log.size() << "):";
  for (int i = 0; i < theta.size() && i < 6; ++i) m << (i ? ", " : " ") << spec_.parameters[i].name << " = " << theta(i);
  if (theta.size() > 6) m << ", ...";
  m << "; " << reason;
  state_.rejected.push_back(m.str());
  message(m.str());
}

bool Engine::lbfgs(const double* u, double* cost, double* grad) const {
  const Eigen::VectorXd theta = map_->theta(u);
  const FitLogEntry* e = replay(FitLogEntry::Type::Gradient, theta);
  FitLogEntry fresh;
  if (!e) {
    ensure_restored();
    if (stop_requested()) return false;  // end the line search quickly; not logged
    fresh.type = FitLogEntry::Type::Gradient;
    fresh.theta = theta;
    try {
      if (run_.inject_failure && run_.inject_failure(theta)) throw NumericalError("SCF failure injected by a test hook");
      const GradientResult r = train_->evaluate(theta);
      max_linear_residual_ = std::max(max_linear_residual_, r.max_linear_residual);
      fresh.loss = r.loss + reg_.value(theta);
      fresh.gradient = r.gradient + reg_.gradient(theta);
      if (!std::isfinite(fresh.loss) || !fresh.gradient.allFinite())
        throw NumericalError("the loss or its gradient is not finite");
      fresh.ok = true;
    } catch (const InputError& x) {
      fresh.reason = std::string("invalid system: ") + x.what();
    } catch (const NumericalError& x) {
      fresh.reason = x.what();
    }
    ++evaluations_;
    state_.log.push_back(fresh);
    e = &state_.log.back();
    if (!e->ok) reject(theta, e->reason);
  }
  if (!e->ok) return false;
  *cost = e->loss;
  if (grad) {
    const Eigen::VectorXd d = map_->derivative(u);
    for (int i = 0; i < theta.size(); ++i) grad[i] = e->gradient(i) * d(i);
  }
  return true;
}

bool Engine::lm(const double* x, double* residuals, double* jacobian) const {
  const Eigen::VectorXd theta = Eigen::Map<const Eigen::VectorXd>(x, reg_.p);
  const auto type = jacobian ? FitLogEntry::Type::ResidualJacobian : FitLogEntry::Type::Residual;
  const FitLogEntry* e = replay(type, theta);
  if (!e) {
    ensure_restored();
    if (stop_requested()) return false;
    FitLogEntry fresh;
    fresh.type = type;
    fresh.theta = theta;
    const bool solved_here = jacobian && !state_.log.empty() && state_.log.back().ok && same_bits(state_.log.back().theta, theta);
    try {
      if (!solved_here && run_.inject_failure && run_.inject_failure(theta))
        throw NumericalError("SCF failure injected by a test hook");
      const ResidualResult r = train_->residuals(theta, jacobian != nullptr);
      max_linear_residual_ = std::max(max_linear_residual_, r.max_linear_residual);
      fresh.residuals.resize(num_residuals());
      fresh.residuals << r.residuals, reg_.residuals(theta);
      fresh.loss = fresh.residuals.squaredNorm();
      if (jacobian) {
        fresh.jacobian.resize(num_residuals(), reg_.p);
        fresh.jacobian << r.jacobian, reg_.jacobian();
        fresh.gradient = 2.0 * fresh.jacobian.transpose() * fresh.residuals;
        if (!fresh.jacobian.allFinite()) throw NumericalError("the Jacobian is not finite");
      }
      if (!fresh.residuals.allFinite()) throw NumericalError("the residuals are not finite");
      fresh.ok = true;
    } catch (const InputError& err) {
      fresh.reason = std::string("invalid system: ") + err.what();
    } catch (const NumericalError& err) {
      fresh.reason = err.what();
    }
    ++evaluations_;
    state_.log.push_back(std::move(fresh));
    e = &state_.log.back();
    if (!e->ok) reject(theta, e->reason);
  }
  if (!e->ok) return false;
  std::memcpy(residuals, e->residuals.data(), sizeof(double) * e->residuals.size());
  if (jacobian) {
    // Ceres wants row-major residual x parameter blocks.
    const int m = static_cast<int>(e->jacobian.rows()), p = static_cast<int>(e->jacobian.cols());
    for (int r = 0; r < m; ++r)
      for (int c = 0; c < p; ++c) jacobian[r * p + c] = e->jacobian(r, c);
  }
  return true;
}

ceres::CallbackReturnType Engine::iteration(const ceres::IterationSummary& s, const Eigen::VectorXd& theta) const {
  // A restart's iteration 0 is the point the previous run ended at: already recorded.
  if (restarts_ > 0 && s.iteration == 0) return ceres::SOLVER_CONTINUE;
  FitIteration it;
  if (replay_iter_ < replay_.iterations.size()) {
    it = replay_.iterations[replay_iter_++];
    state_.iterations.push_back(it);
    history_.push_back(it);
    return ceres::SOLVER_CONTINUE;
  }
  ensure_restored();
  it.iteration = iteration_offset_ + s.iteration;
  it.step_successful = s.iteration == 0 || s.step_is_successful;
  // Loss and gradient at the current point, from the last evaluation there.
  bool have_loss = false;
  for (auto e = state_.log.rbegin(); e != state_.log.rend(); ++e) {
    if (!e->ok || !same_bits(e->theta, theta)) continue;
    if (!have_loss) it.loss = e->loss;
    have_loss = true;
    if (e->gradient.size()) {
      it.gradient_norm = e->gradient.norm();
      break;
    }
  }
  const int every = std::max(1, spec_.options.validation_every);
  if (valid_ && it.iteration % every == 0) {
    try {
      it.validation_loss = valid_->terms(theta).loss;
    } catch (const std::exception& x) {
      message(std::string("validation loss not available at iteration ") + std::to_string(s.iteration) + ": " + x.what());
    }
  }
  it.seconds = elapsed();
  state_.iterations.push_back(it);
  history_.push_back(it);
  if (run_.observer) run_.observer->iteration(it);
  const bool stop = stop_requested() ||
                    (run_.stop_after_iterations >= 0 && it.iteration >= run_.stop_after_iterations);
  if (stop) {
    interrupted_ = true;
    write_checkpoint();
    return ceres::SOLVER_ABORT;
  }
  if (it.iteration > 0 && it.iteration % std::max(1, spec_.options.checkpoint_every) == 0) write_checkpoint();
  return ceres::SOLVER_CONTINUE;
}

void Engine::write_checkpoint(const std::pair<std::vector<KsSolution>, std::vector<KsSolution>>* states) const {
  if (run_.checkpoint.empty() || comm().rank() != 0) return;  // one writer; every rank holds the same state
  FitCheckpointState st = state_;
  st.seconds_before = elapsed();
  if (states) {
    st.train_states = states->first;
    st.valid_states = states->second;
  } else {
    st.train_states = train_->solutions();
    if (valid_) st.valid_states = valid_->solutions();
  }
  write_file_atomically(run_.checkpoint, serialize_checkpoint(st));
}

// Ceres glue.
class LbfgsFunction final : public ceres::FirstOrderFunction {
 public:
  explicit LbfgsFunction(const Engine& e) : e_(e) {}
  bool Evaluate(const double* x, double* cost, double* gradient) const override { return e_.lbfgs(x, cost, gradient); }
  int NumParameters() const override { return e_.map().size(); }

 private:
  const Engine& e_;
};

class LmCost final : public ceres::CostFunction {
 public:
  LmCost(const Engine& e, int m, int p) : e_(e) {
    set_num_residuals(m);
    mutable_parameter_block_sizes()->push_back(p);
  }
  bool Evaluate(double const* const* x, double* residuals, double** jacobians) const override {
    return e_.lm(x[0], residuals, jacobians ? jacobians[0] : nullptr);
  }

 private:
  const Engine& e_;
};

class Callback final : public ceres::IterationCallback {
 public:
  Callback(const Engine& e, const double* x, int n, bool mapped) : e_(e), x_(x), n_(n), mapped_(mapped) {}
  ceres::CallbackReturnType operator()(const ceres::IterationSummary& s) override {
    const Eigen::VectorXd theta = mapped_ ? e_.map().theta(x_) : Eigen::VectorXd(Eigen::Map<const Eigen::VectorXd>(x_, n_));
    return e_.iteration(s, theta);
  }

 private:
  const Engine& e_;
  const double* x_;
  int n_;
  bool mapped_;
};

FitSnapshot Engine::snapshot(const Eigen::VectorXd& theta, bool with_jacobian, Eigen::MatrixXd* jacobian,
                             Eigen::VectorXd* residuals) {
  FitSnapshot s;
  s.theta = theta;
  if (train_->residual_form()) {
    const ResidualResult r = train_->residuals(theta, with_jacobian);
    max_linear_residual_ = std::max(max_linear_residual_, r.max_linear_residual);
    s.training_values = r.term_values;
    s.training_quantities = r.term_quantities;
    s.training_loss = r.loss;
    if (residuals) {
      residuals->resize(num_residuals());
      *residuals << r.residuals, reg_.residuals(theta);
    }
    if (with_jacobian && jacobian) {
      jacobian->resize(num_residuals(), reg_.p);
      *jacobian << r.jacobian, reg_.jacobian();
    }
  } else {
    const GradientResult r = train_->terms(theta);
    s.training_values = r.term_values;
    s.training_quantities = r.term_quantities;
    s.training_loss = r.loss;
  }
  s.regularization = reg_.value(theta);
  s.training_loss += s.regularization;
  if (valid_) {
    try {
      const GradientResult r = valid_->terms(theta);
      s.validation_values = r.term_values;
      s.validation_quantities = r.term_quantities;
      s.validation_loss = r.loss;
    } catch (const NumericalError& e) {
      message(std::string("validation systems could not be evaluated: ") + e.what());
    }
  }
  s.solutions.resize(spec_.systems.size());
  for (std::size_t i = 0; i < spec_.systems.size(); ++i) {
    if (!train_->solutions()[i].v_s.empty())
      s.solutions[i] = train_->solutions()[i];
    else if (valid_ && !valid_->solutions()[i].v_s.empty())
      s.solutions[i] = valid_->solutions()[i];
  }
  return s;
}

void Engine::uncertainty(FitResult& res, const Eigen::MatrixXd& J, const Eigen::VectorXd& r) const {
  FitUncertainty& u = res.uncertainty;
  const int m = static_cast<int>(J.rows()), p = static_cast<int>(J.cols());
  u.residuals = m;
  u.degrees_of_freedom = m - p;
  const Eigen::MatrixXd A = J.transpose() * J;
  Eigen::VectorXd d(p);
  for (int i = 0; i < p; ++i) d(i) = A(i, i) > 0 ? 1.0 / std::sqrt(A(i, i)) : 0.0;
  if ((d.array() == 0.0).any()) {
    u.note = "a parameter does not affect any residual at the optimum: no uncertainties";
    u.ill_conditioned = true;
    return;
  }
  const Eigen::MatrixXd S = d.asDiagonal() * A * d.asDiagonal();
  const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(S);
  const double lmin = es.eigenvalues()(0), lmax = es.eigenvalues()(p - 1);
  u.condition_number = lmin > 0 ? lmax / lmin : std::numeric_limits<double>::infinity();
  if (!(lmin > lmax * 1e-15)) {
    u.note = "the Gauss–Newton matrix is singular at the optimum (parameters not determined by the data)";
    u.ill_conditioned = true;
    u.condition_number = 0.0;
    return;
  }
  u.ill_conditioned = u.condition_number > spec_.options.ill_conditioned;
  const Eigen::MatrixXd Sinv = es.eigenvectors() * es.eigenvalues().cwiseInverse().asDiagonal() * es.eigenvectors().transpose();
  const Eigen::MatrixXd C = d.asDiagonal() * Sinv * d.asDiagonal();  // (J^T J)^-1
  u.standard_error_unscaled = C.diagonal().cwiseMax(0.0).cwiseSqrt();
  u.correlation.resize(p, p);
  for (int i = 0; i < p; ++i)
    for (int j = 0; j < p; ++j) u.correlation(i, j) = Sinv(i, j) / std::sqrt(Sinv(i, i) * Sinv(j, j));
  if (m > p) {
    u.residual_variance = r.squaredNorm() / (m - p);
    u.standard_error = (u.residual_variance * C.diagonal()).cwiseMax(0.0).cwiseSqrt();
  } else {
    u.note = "as many parameters as residuals, so no residual variance";
  }
  u.computed = true;
  if (u.ill_conditioned) {
    char buf[200];
    std::snprintf(buf, sizeof buf, "the fit is ill-conditioned: condition number %.3g of the scaled Gauss–Newton matrix "
                  "(parameters strongly correlated; their errors are unreliable)", u.condition_number);
    res.warnings.push_back(buf);
  }
}

// Ceres reports line-search trouble and failed evaluations through glog on stderr; the fit
// reports them itself (rejected points, the termination message), so glog is kept quiet.
struct QuietGlog {
  int saved = FLAGS_minloglevel;
  QuietGlog() { FLAGS_minloglevel = google::GLOG_FATAL; }
  ~QuietGlog() { FLAGS_minloglevel = saved; }
};

FitResult Engine::run() {
  const QuietGlog quiet;
  FitResult res;
  const int p = static_cast<int>(spec_.parameters.size());
  const bool lbfgs = spec_.options.optimizer == FitOptions::Optimizer::Lbfgs;
  if (run_.resume) {
    if (run_.checkpoint.empty()) throw InputError("--resume needs a checkpoint file");
    std::ifstream f(run_.checkpoint, std::ios::binary);
    if (!f) throw InputError(SourceLocation{run_.checkpoint, 0, 0, ""}, "no checkpoint to resume from");
    std::stringstream ss;
    ss << f.rdbuf();
    replay_ = parse_checkpoint(ss.str(), run_.checkpoint);
    if (replay_.fingerprint != state_.fingerprint)
      throw InputError(SourceLocation{run_.checkpoint, 0, 0, ""},
                       "this checkpoint belongs to a different fit (the systems, parameters, loss or optimizer "
                       "settings changed); delete it or run without --resume");
    state_.seconds_before = replay_.seconds_before;
    state_.rejected = replay_.rejected;
    for (const auto& r : replay_.rejected) message("(from the checkpoint) " + r);
    restored_ = false;
  }
  res.initial = train_->initial_values();
  // The start: an SCF failure here is the user's problem, not a rejected step.
  res.before = snapshot(res.initial, false, nullptr, nullptr);
  Eigen::VectorXd final_theta;
  ceres::TerminationType term = ceres::CONVERGENCE;
  std::string ceres_message;
  if (lbfgs) {
    map_ = std::make_unique<BoundMap>(spec_.parameters, spec_.info);
    std::vector<double> u = map_->start(res.initial, spec_.parameters);
    // Ceres's Wolfe search contracts the step when a trial point fails while bracketing, but
    // gives up when one fails while zooming; then L-BFGS restarts from the last accepted
    // point (its curvature memory is lost, the path stays deterministic).
    for (;;) {
      auto failed_entries = [&] {
        return std::count_if(state_.log.begin(), state_.log.end(), [](const FitLogEntry& e) { return !e.ok; });
      };
      const auto rejected_before = failed_entries();
      ceres::GradientProblemSolver::Options o;
      o.line_search_direction_type = ceres::LBFGS;
      o.max_lbfgs_rank = spec_.options.lbfgs_rank;
      o.max_num_iterations = std::max(0, spec_.options.max_iterations - iteration_offset_);
      o.function_tolerance = spec_.options.loss_tolerance;
      o.gradient_tolerance = spec_.options.gradient_tolerance;
      o.parameter_tolerance = spec_.options.step_tolerance;
      o.logging_type = ceres::SILENT;
      o.update_state_every_iteration = true;
      Callback cb(*this, u.data(), p, true);
      o.callbacks.push_back(&cb);
      ceres::GradientProblem problem(new LbfgsFunction(*this));
      ceres::GradientProblemSolver::Summary summary;
      ceres::Solve(o, problem, u.data(), &summary);
      term = summary.termination_type;
      ceres_message = summary.message;
      const bool retry = term == ceres::FAILURE && failed_entries() > rejected_before && restarts_ < 5 &&
                         !interrupted_ && iteration_offset_ + static_cast<int>(summary.iterations.size()) - 1 <
                                              spec_.options.max_iterations;
      if (!retry) break;
      ++restarts_;
      iteration_offset_ = history_.empty() ? 0 : history_.back().iteration;
      message("the line search failed after a rejected trial point (" + ceres_message + "); L-BFGS restarts from the "
              "last accepted point at iteration " + std::to_string(iteration_offset_));
    }
    final_theta = map_->theta(u.data());
  } else {
    map_ = std::make_unique<BoundMap>(spec_.parameters, spec_.info);  // unused by LM; keeps map() valid
    std::vector<double> x(res.initial.data(), res.initial.data() + p);
    ceres::Problem problem;
    problem.AddResidualBlock(new LmCost(*this, num_residuals(), p), nullptr, x.data());
    for (int i = 0; i < p; ++i) {
      if (std::isfinite(spec_.parameters[i].lower)) problem.SetParameterLowerBound(x.data(), i, spec_.parameters[i].lower);
      if (std::isfinite(spec_.parameters[i].upper)) problem.SetParameterUpperBound(x.data(), i, spec_.parameters[i].upper);
    }
    ceres::Solver::Options o;
    o.minimizer_type = ceres::TRUST_REGION;
    o.trust_region_strategy_type = ceres::LEVENBERG_MARQUARDT;
    o.linear_solver_type = ceres::DENSE_QR;
    o.max_num_iterations = spec_.options.max_iterations;
    o.function_tolerance = spec_.options.loss_tolerance;
    o.gradient_tolerance = spec_.options.gradient_tolerance;
    o.parameter_tolerance = spec_.options.step_tolerance;
    o.logging_type = ceres::SILENT;
    o.num_threads = 1;
    o.update_state_every_iteration = true;
    Callback cb(*this, x.data(), p, false);
    o.callbacks.push_back(&cb);
    ceres::Solver::Summary summary;
    ceres::Solve(o, &problem, &summary);
    term = summary.termination_type;
    ceres_message = summary.message;
    final_theta = Eigen::Map<const Eigen::VectorXd>(x.data(), p);
  }
  ensure_restored();
  // A signal during a line search makes the remaining evaluations fail fast (not logged), so
  // Ceres may stop without calling back: the logged evaluations are still exact to replay.
  if (!interrupted_ && stop_requested()) {
    interrupted_ = true;
    write_checkpoint();
  }
  res.history = history_;
  res.rejected = state_.rejected;
  res.evaluations = evaluations_;
  res.max_linear_residual = max_linear_residual_;
  res.replayed_evaluations = replayed_;
  res.message = ceres_message;
  res.fitted = final_theta;
  if (interrupted_ || term == ceres::USER_FAILURE) {
    res.termination = FitResult::Termination::Interrupted;
    res.seconds = elapsed();
    return res;
  }
  switch (term) {
    case ceres::CONVERGENCE:
    case ceres::USER_SUCCESS:
      res.termination = FitResult::Termination::Converged;
      break;
    case ceres::NO_CONVERGENCE:
      res.termination = FitResult::Termination::IterationLimit;
      break;
    default:
      res.termination = FitResult::Termination::NoFurtherProgress;
      break;
  }
  // The optimum: term values, solutions and, for the errors, the residual Jacobian.
  const bool want_errors = spec_.options.uncertainties && train_->residual_form() && p <= spec_.options.uncertainty_max_parameters;
  Eigen::MatrixXd J;
  Eigen::VectorXd r;
  // The re-evaluation at the optimum solves afresh from these warm starts, which the final
  // checkpoint stores: a resumed finished fit then repeats exactly this solve and agrees bit
  // for bit. Reusing the cached solution of the last evaluation instead would be one SCF
  // cheaper but cannot be reproduced from the checkpoint (it differed by ~4e-9 relative).
  std::pair<std::vector<KsSolution>, std::vector<KsSolution>> before_final{train_->solutions(), {}};
  if (valid_) before_final.second = valid_->solutions();
  train_->set_solutions(before_final.first);
  if (valid_) valid_->set_solutions(before_final.second);
  try {
    res.after = snapshot(final_theta, want_errors, &J, &r);
  } catch (const NumericalError& e) {
    throw NumericalError(std::string("the fitted point could not be evaluated again: ") + e.what(), e.details());
  }
  res.max_linear_residual = max_linear_residual_;  // now including the Jacobian at the optimum
  const double krylov_tol = spec_.gradient.response.krylov_tolerance;
  if (res.max_linear_residual > krylov_tol) {
    char buf[240];
    std::snprintf(buf, sizeof buf,
                  "a linear solve stopped improving at relative residual %.1e (tolerance %.1e): derivatives carry an "
                  "error of about that relative size",
                  res.max_linear_residual, krylov_tol);
    res.warnings.push_back(buf);
  }
  if (want_errors)
    uncertainty(res, J, r);
  else if (!train_->residual_form())
    res.uncertainty.note = "the loss has terms without targets (not a least-squares problem): no Gauss–Newton errors";
  else if (!spec_.options.uncertainties)
    res.uncertainty.note = "not requested";
  else
    res.uncertainty.note = "more than " + std::to_string(spec_.options.uncertainty_max_parameters) +
                           " parameters: no Gauss–Newton errors (raise [fit] uncertainty_max_parameters)";
  res.seconds = elapsed();
  int steps = 0;
  for (const auto& h : res.history) steps += h.iteration > 0 ? 1 : 0;
  res.seconds_per_iteration = steps ? res.seconds / steps : 0.0;
  state_.complete = true;
  write_checkpoint(&before_final);
  return res;
}

}  // namespace

void prepare_fit(FitSpec& spec) {
  if (spec.training.empty()) throw InputError("the training set is empty: no [[loss]] term is in the training set");
  if (spec.parameters.empty()) throw InputError("nothing to fit: every parameter is fixed");
  if (spec.info.size() != spec.parameters.size()) spec.info.resize(spec.parameters.size());
  if (spec.training_info.size() != spec.training.size()) spec.training_info.resize(spec.training.size());
  if (spec.validation_info.size() != spec.validation.size()) spec.validation_info.resize(spec.validation.size());
  std::vector<bool> trained(spec.systems.size(), false);
  for (const LossTerm& t : spec.training) {
    if (t.system >= 0 && t.system < static_cast<int>(trained.size())) trained[t.system] = true;
    if (t.system_b >= 0 && t.system_b < static_cast<int>(trained.size())) trained[t.system_b] = true;
  }
  for (std::size_t i = 0; i < spec.parameters.size(); ++i) {
    const ParameterRef& p = spec.parameters[i];
    bool any = false;
    for (std::size_t s = 0; s < spec.systems.size(); ++s) any = any || (trained[s] && acts_on(p, static_cast<int>(s)));
    if (!any)
      throw InputError("parameter '" + p.name +
                       "' acts only on systems outside the training set: the training loss does not depend on it");
    if (!(spec.info[i].scale > 0)) throw InputError("parameter '" + p.name + "': its scale must be positive");
    if (p.kind == ParameterRef::Kind::GridPotential) {
      const SystemSpec& s = spec.systems[p.system < 0 ? 0 : p.system];
      const Mesh m = mesh_of(s);
      spec.info[i].node_x = m.x()(p.index);
      spec.info[i].node_weight = m.w()(p.index);
    }
  }
  if (spec.options.optimizer == FitOptions::Optimizer::LevenbergMarquardt)
    for (const LossTerm& t : spec.training)
      if (t.kind != LossTerm::Kind::Density && !t.target)
        throw InputError("levenberg_marquardt minimizes a sum of squares: loss term '" + t.name +
                         "' has no target (give one, or use lbfgs)");
  if (spec.options.threads < 1) spec.options.threads = 1;
}

FitResult run_fit(const FitSpec& spec_in, const FitRunOptions& run) {
  FitSpec spec = spec_in;
  prepare_fit(spec);
  Engine e(spec, run);
  return e.run();
}

}  // namespace stillpoint
