#include "stillpoint/response/gradient.hpp"

#include <algorithm>
#include <memory>
#include <chrono>
#include <cmath>
#include <sstream>

#include "common/threads.hpp"
#include "parallel/distribute.hpp"
#include "parallel/transport.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace stillpoint {

namespace {

InputError located(const SourceLocation& where, const std::string& what) {
  return where.file.empty() ? InputError(what) : InputError(where, what);
}

bool acts_on(const ParameterRef& p, int system) { return p.system < 0 || p.system == system; }

double& field_ref(SystemSpec& s, const ParameterRef& p) {
  using K = ParameterRef::Kind;
  switch (p.kind) {
    case K::XcWeight:
      if (s.xc_weights.empty()) s.xc_weights.assign(s.xc.size(), 1.0);
      if (p.index < 0 || p.index >= static_cast<int>(s.xc_weights.size()))
        throw InputError("parameter '" + p.name + "': system '" + s.name + "' has no xc term " + std::to_string(p.index));
      return s.xc_weights[p.index];
    case K::Gaussian:
    case K::Harmonic: {
      if (p.index < 0 || p.index >= static_cast<int>(s.line.potentials.size()))
        throw located(p.where, "parameter '" + p.name + "': system '" + s.name + "' has no potential " + std::to_string(p.index) +
                       " (it has " + std::to_string(s.line.potentials.size()) + ")");
      ExternalTerm& t = s.line.potentials[p.index];
      const bool gauss = t.kind == ExternalTerm::Kind::Gaussian;
      if ((p.kind == K::Gaussian) != gauss || t.kind == ExternalTerm::Kind::Table)
        throw located(p.where, "parameter '" + p.name + "': potential " + std::to_string(p.index) + " of '" + s.name +
                                   "' is not of that kind");
      if (p.field == "depth" && gauss) return t.depth;
      if (p.field == "width" && gauss) return t.width;
      if (p.field == "omega" && !gauss) return t.omega;
      if (p.field == "center") return t.center;
      throw InputError("parameter '" + p.name + "': unknown field '" + p.field + "'");
    }
    case K::Nucleus: {
      if (p.index < 0 || p.index >= static_cast<int>(s.line.nuclei.size()))
        throw located(p.where, "parameter '" + p.name + "': system '" + s.name + "' has no nucleus " + std::to_string(p.index));
      Nucleus1d& n = s.line.nuclei[p.index];
      if (p.field == "charge") return n.charge;
      if (p.field == "position") return n.position;
      if (p.field == "softening") return n.softening;
      throw InputError("parameter '" + p.name + "': unknown nucleus field '" + p.field + "'");
    }
    case K::XcParameter: {
      if (s.xc_parameters.size() < s.xc.size()) s.xc_parameters.resize(s.xc.size());
      if (p.index < 0 || p.index >= static_cast<int>(s.xc.size()))
        throw InputError("parameter '" + p.name + "': system '" + s.name + "' has no xc term " + std::to_string(p.index));
      auto& list = s.xc_parameters[p.index];
      if (list.empty()) {
        XcSettings xs;
        xs.one_dimensional = s.geometry == Geometry::Line;
        xs.softening = s.line.electron_softening;
        for (const FormulaSpec& fs : s.formulas) xs.formulas.push_back(compile_formula(fs));
        const XcFunctional f = make_functional({s.xc[p.index]}, xs);
        list = f.term(0).parameters();
      }
      if (p.sub < 0 || p.sub >= static_cast<int>(list.size()))
        throw InputError("parameter '" + p.name + "': term '" + s.xc[p.index] + "' has no parameter " + std::to_string(p.sub));
      return list[p.sub];
    }
    case K::GridPotential: {
      if (s.nodal_potential.empty()) {
        const Mesh m = mesh_of(s);
        s.nodal_potential.assign(m.num_nodes(), 0.0);
      }
      if (p.index < 0 || p.index >= static_cast<int>(s.nodal_potential.size()))
        throw InputError("parameter '" + p.name + "': node index out of range");
      return s.nodal_potential[p.index];
    }
  }
  throw std::logic_error("unhandled parameter kind");
}

// Runs f, placing a non-finite model value at its mesh coordinate.
template <class F>
auto located(const Mesh& m, const KsSolution& S, F f) {
  try {
    return f();
  } catch (const NonFiniteModelError& e) {
    throw e.with_position(m, S.density);
  }
}

// dE_nn/dtheta for nucleus parameters.
double nuclear_repulsion_derivative(const SystemSpec& s, const ParameterRef& p);

}  // namespace

std::vector<Eigen::VectorXd> parameter_potential(const KsProblem& P, const KsSolution& S, const ParameterRef& p) {
  using K = ParameterRef::Kind;
  const Mesh& m = P.mesh();
  const int N = m.num_nodes();
  const SystemSpec& s = P.spec();
  Eigen::VectorXd v = Eigen::VectorXd::Zero(N);
  switch (p.kind) {
    case K::XcWeight: {
      // The potential of the one term alone, with unit weight: d v_xc / d w_t.
      XcFunctional term_only = P.xc();
      for (std::size_t i = 0; i < term_only.size(); ++i) term_only.set_weight(i, static_cast<int>(i) == p.index ? 1.0 : 0.0);
      return located(m, S, [&] { return evaluate_xc(m, term_only, S.density, P.density_threshold()).potential; });
    }
    case K::Gaussian: {
      const ExternalTerm& t = s.line.potentials[p.index];
      for (int k = 0; k < N; ++k) {
        const double d = m.x()(k) - t.center, g = std::exp(-d * d / (2 * t.width * t.width));
        if (p.field == "depth") v(k) = -g;
        if (p.field == "center") v(k) = -t.depth * g * d / (t.width * t.width);
        if (p.field == "width") v(k) = -t.depth * g * d * d / (t.width * t.width * t.width);
      }
      break;
    }
    case K::Harmonic: {
      const ExternalTerm& t = s.line.potentials[p.index];
      for (int k = 0; k < N; ++k) {
        const double d = m.x()(k) - t.center;
        if (p.field == "omega") v(k) = t.omega * d * d;
        if (p.field == "center") v(k) = -t.omega * t.omega * d;
      }
      break;
    }
    case K::Nucleus: {
      const Nucleus1d& n = s.line.nuclei[p.index];
      for (int k = 0; k < N; ++k) {
        const double d = m.x()(k) - n.position, q = d * d + n.softening * n.softening, r = std::sqrt(q);
        if (p.field == "charge") v(k) = -1.0 / r;
        if (p.field == "position") v(k) = -n.charge * d / (q * r);
        if (p.field == "softening") v(k) = n.charge * n.softening / (q * r);
      }
      break;
    }
    case K::GridPotential:
      v(p.index) = 1.0;
      break;
    case K::XcParameter:
      return located(m, S, [&] {
        return xc_parameter_derivative(m, P.xc(), p.index, p.sub, S.density, P.density_threshold()).potential;
      });
  }
  return std::vector<Eigen::VectorXd>(P.nspin(), v);
}

namespace {

double nuclear_repulsion_derivative(const SystemSpec& s, const ParameterRef& p) {
  if (p.kind != ParameterRef::Kind::Nucleus || p.field == "softening") return 0.0;
  const auto& nuc = s.line.nuclei;
  const double b = std::isnan(s.line.nucleus_softening) ? s.line.electron_softening : s.line.nucleus_softening;
  double d_e = 0.0;
  for (std::size_t j = 0; j < nuc.size(); ++j) {
    if (static_cast<int>(j) == p.index) continue;
    const double d = nuc[p.index].position - nuc[j].position, q = d * d + b * b, r = std::sqrt(q);
    if (p.field == "charge") d_e += nuc[j].charge / r;
    if (p.field == "position") d_e += -nuc[p.index].charge * nuc[j].charge * d / (q * r);
  }
  return d_e;
}

}  // namespace

double explicit_energy_derivative(const KsProblem& P, const KsSolution& S, const ParameterRef& p) {
  if (p.kind == ParameterRef::Kind::XcWeight) {
    XcFunctional term_only = P.xc();
    for (std::size_t i = 0; i < term_only.size(); ++i) term_only.set_weight(i, static_cast<int>(i) == p.index ? 1.0 : 0.0);
    return located(P.mesh(), S, [&] { return xc_energy(P.mesh(), term_only, S.density, P.density_threshold()); });
  }
  if (p.kind == ParameterRef::Kind::XcParameter)
    return located(P.mesh(), S, [&] {
      return xc_parameter_derivative(P.mesh(), P.xc(), p.index, p.sub, S.density, P.density_threshold()).energy;
    });
  const auto dv = parameter_potential(P, S, p);
  return P.mesh().density_weight().dot(dv[0].cwiseProduct(S.total_density())) + nuclear_repulsion_derivative(P.spec(), p);
}

namespace {

struct LevelRef {
  int channel = -1, state = -1;
  double energy = 0.0;
};

LevelRef find_level(const KsSolution& S, const LossTerm& t, const std::string& system_name) {
  LevelRef best;
  const bool any_spin = S.density.size() == 1;
  if (t.state == "homo" || t.state == "lumo") {
    const bool homo = t.state == "homo";
    double homo_e = -std::numeric_limits<double>::infinity();
    for (const Level& lv : S.levels)
      if ((any_spin || lv.spin == t.spin) && lv.occupation > 0) homo_e = std::max(homo_e, lv.energy);
    for (const Level& lv : S.levels) {
      if (!(any_spin || lv.spin == t.spin)) continue;
      if (homo && lv.occupation > 0 && (best.channel < 0 || lv.energy > best.energy))
        best = {lv.channel, lv.index, lv.energy};
      if (!homo && lv.occupation == 0 && lv.energy > homo_e && (best.channel < 0 || lv.energy < best.energy))
        best = {lv.channel, lv.index, lv.energy};
    }
  } else {
    for (const Level& lv : S.levels)
      if ((any_spin || lv.spin == t.spin) && lv.label == t.state) best = {lv.channel, lv.index, lv.energy};
  }
  if (best.channel < 0)
    throw located(t.where, "loss term '" + t.name + "': no state '" + t.state + "' (spin " + std::to_string(t.spin) +
                     ") in system '" + system_name + "'");
  return best;
}

}  // namespace

Eigen::VectorXd default_fd_steps(const std::vector<ParameterRef>& params, const Eigen::VectorXd& theta, double relative) {
  Eigen::VectorXd h(theta.size());
  for (int i = 0; i < theta.size(); ++i) {
    const double floor = params[i].kind == ParameterRef::Kind::XcParameter ? 0.1 : 1.0;
    h(i) = relative * std::max(std::abs(theta(i)), floor);
    // A potential at one node moves the solution only through that node's small weight, so
    // its step is 50 times larger to stay above SCF rounding (~1e-12 per solve); Richardson
    // extrapolation keeps the truncation error near 1e-9 relative (measured on Ne and 1D He).
    if (params[i].kind == ParameterRef::Kind::GridPotential) h(i) *= 50.0;
  }
  return h;
}

Eigen::VectorXd parameter_values(const std::vector<SystemSpec>& systems, const std::vector<ParameterRef>& params) {
  // One working copy per system, made on first use: field_ref may fill defaults (a zero grid
  // potential on the mesh, a family's default parameters), and a copy or a mesh per parameter
  // made this O(P^2) for hundreds of grid or Gaussian parameters.
  Eigen::VectorXd v(params.size());
  std::vector<std::unique_ptr<SystemSpec>> copies(systems.size());
  for (std::size_t i = 0; i < params.size(); ++i) {
    const int s = params[i].system < 0 ? 0 : params[i].system;
    if (s >= static_cast<int>(systems.size())) throw InputError("parameter '" + params[i].name + "' names a missing system");
    if (!copies[s]) copies[s] = std::make_unique<SystemSpec>(systems[s]);
    v(i) = field_ref(*copies[s], params[i]);
  }
  return v;
}

std::vector<SystemSpec> apply_parameters(const std::vector<SystemSpec>& systems, const std::vector<ParameterRef>& params,
                                         const Eigen::VectorXd& theta) {
  std::vector<SystemSpec> out = systems;
  if (static_cast<std::size_t>(theta.size()) != params.size())
    throw InputError("expected " + std::to_string(params.size()) + " parameter values, got " + std::to_string(theta.size()));
  for (std::size_t i = 0; i < params.size(); ++i)
    if (!std::isfinite(theta(i)))
      throw located(params[i].where, "parameter '" + params[i].name + "' is not a finite number (" +
                                         std::to_string(theta(i)) + "); every parameter value must be finite");
  for (std::size_t i = 0; i < params.size(); ++i)
    for (int s = 0; s < static_cast<int>(out.size()); ++s)
      if (acts_on(params[i], s)) {
        double& f = field_ref(out[s], params[i]);
        // A nuclear charge changes the electron count unless the net charge follows it; the
        // derivative is defined at fixed occupations, so the electron count is kept.
        if (params[i].kind == ParameterRef::Kind::Nucleus && params[i].field == "charge") out[s].charge += theta(i) - f;
        f = theta(i);
      }
  return out;
}

GradientProblem::GradientProblem(std::vector<SystemSpec> systems, std::vector<ParameterRef> params,
                                 std::vector<LossTerm> loss, GradientOptions options)
    : systems_(std::move(systems)), params_(std::move(params)), loss_(std::move(loss)), options_(options) {
  if (loss_.empty()) throw InputError("the loss has no terms");
  std::vector<bool> used(systems_.size(), false);
  for (std::size_t t = 0; t < loss_.size(); ++t) {
    const LossTerm& term = loss_[t];
    if (term.system < 0 || term.system >= static_cast<int>(systems_.size()))
      throw InputError("loss term '" + term.name + "' names a missing system");
    if (term.kind == LossTerm::Kind::EnergyDifference &&
        (term.system_b < 0 || term.system_b >= static_cast<int>(systems_.size())))
      throw InputError("loss term '" + term.name + "' needs two existing systems");
    used[term.system] = true;
    if (term.kind == LossTerm::Kind::EnergyDifference) used[term.system_b] = true;
    if (term.kind == LossTerm::Kind::Density) {
      for (std::size_t k = 0; k < term.reference.size(); ++k) {
        const double r = term.region.empty() ? 1.0 : term.region[k];
        if (r != 0.0) {
          row_term_.push_back(static_cast<int>(t));
          row_node_.push_back(static_cast<int>(k));
        }
      }
    } else {
      row_term_.push_back(static_cast<int>(t));
      row_node_.push_back(-1);
    }
  }
  for (std::size_t s = 0; s < systems_.size(); ++s)
    if (used[s]) active_.push_back(static_cast<int>(s));
  options_.threads = std::max(1, options_.threads);
  warm_.resize(systems_.size());
  // Until measured, a system's cost is guessed as nodes x (electrons + 1): the states solved
  // per iteration grow with the electrons, each solve with the nodes.
  for (int s : active_) {
    const double nodes = grid_cost(systems_[s].grid, systems_[s].geometry, GridUse::Banded).nodes;
    scf_cost_.push_back(nodes * (systems_[s].electron_count() + 1.0));
  }
  meshes_.resize(systems_.size());
}

bool GradientProblem::residual_form() const {
  return std::all_of(loss_.begin(), loss_.end(),
                     [](const LossTerm& t) { return t.kind == LossTerm::Kind::Density || t.target.has_value(); });
}

void GradientProblem::set_solutions(std::vector<KsSolution> solutions) {
  solutions.resize(systems_.size());
  warm_ = std::move(solutions);
  cache_.reset();
}

struct GradientProblem::Cache {
  Eigen::VectorXd theta;
  std::vector<std::unique_ptr<KsProblem>> problems;  // null for inactive systems and, under MPI, other ranks' systems
  std::vector<const Mesh*> meshes;                    // every active system's mesh
  std::vector<int> owner;                             // rank that solved each active system
  std::vector<SystemSpec> specs;                      // the systems at theta
  std::vector<KsSolution> solutions;
  double scf_seconds = 0.0;
};

namespace {

// Linear-solve statistics of one system's derivative (kept per system so that parallel
// systems never share a counter), summed into a result in system order.
struct SolveStats {
  int solves = 0, iterations = 0;
  double worst_residual = 0.0;  // largest relative residual of the solves
  void add(const Response& R) {
    ++solves;
    iterations += R.last_iterations();
    worst_residual = std::max(worst_residual, R.last_residual());
  }
  void write(detail::ByteWriter& w) const {
    w.i64(solves);
    w.i64(iterations);
    w.f64(worst_residual);
  }
  void read(detail::ByteReader& r) {
    solves = static_cast<int>(r.i64());
    iterations = static_cast<int>(r.i64());
    worst_residual = r.f64();
  }
  template <class Result>
  void add_to(Result& r) const {
    r.linear_solves += solves;
    r.krylov_iterations += iterations;
    r.max_linear_residual = std::max(r.max_linear_residual, worst_residual);
  }
};

struct Partials {
  double loss = 0.0;
  std::vector<double> term_values, term_quantities;
  std::vector<double> dE;                      // per system
  std::vector<Eigen::VectorXd> dn;             // per system, W-gradient w.r.t. total density (all nodes)
  std::vector<std::vector<std::pair<LevelRef, double>>> deps;  // per system
};

// `meshes`: per system, null for inactive ones.
Partials loss_partials(const std::vector<LossTerm>& terms, const std::vector<const Mesh*>& meshes,
                       const std::vector<KsSolution>& solutions, const std::vector<SystemSpec>& systems) {
  Partials P;
  const std::size_t ns = meshes.size();
  P.dE.assign(ns, 0.0);
  P.deps.resize(ns);
  P.dn.resize(ns);
  for (std::size_t s = 0; s < ns; ++s)
    if (meshes[s]) P.dn[s] = Eigen::VectorXd::Zero(meshes[s]->num_nodes());
  for (const LossTerm& t : terms) {
    const Mesh& mesh = *meshes[t.system];
    const KsSolution& sol = solutions[t.system];
    auto outer = [&](double qv) {
      const double val = t.target ? t.weight * (qv - *t.target) * (qv - *t.target) : t.weight * qv;
      const double d = t.target ? 2.0 * t.weight * (qv - *t.target) : t.weight;
      P.loss += val;
      P.term_values.push_back(val);
      P.term_quantities.push_back(qv);
      return d;
    };
    switch (t.kind) {
      case LossTerm::Kind::Density: {
        const Eigen::VectorXd n = sol.total_density();
        const Eigen::VectorXd& W = mesh.density_weight();
        if (static_cast<int>(t.reference.size()) != n.size())
          throw InputError("loss term '" + t.name + "': the reference density has the wrong number of nodes");
        Eigen::VectorXd diff(n.size());
        for (int k = 0; k < n.size(); ++k) diff(k) = n(k) - t.reference[k];
        Eigen::VectorXd region = Eigen::VectorXd::Ones(n.size());
        if (!t.region.empty())
          for (int k = 0; k < n.size(); ++k) region(k) = t.region[k];
        const double q = (W.array() * region.array() * diff.array().square()).sum();
        // Linear in q: weight * sum W r (n - n_ref)^2; a target makes no sense for a distance.
        P.loss += t.weight * q;
        P.term_values.push_back(t.weight * q);
        P.term_quantities.push_back(q);
        P.dn[t.system] += 2.0 * t.weight * region.cwiseProduct(diff);
        break;
      }
      case LossTerm::Kind::Energy:
        P.dE[t.system] += outer(sol.energy.total);
        break;
      case LossTerm::Kind::EnergyDifference: {
        const double d = outer(sol.energy.total - solutions[t.system_b].energy.total);
        P.dE[t.system] += d;
        P.dE[t.system_b] -= d;
        break;
      }
      case LossTerm::Kind::Eigenvalue: {
        const LevelRef lv = find_level(sol, t, systems[t.system].name);
        P.deps[t.system].push_back({lv, outer(lv.energy)});
        break;
      }
    }
  }
  return P;
}

std::string describe_failure(const std::exception_ptr& e) {
  try {
    std::rethrow_exception(e);
  } catch (const std::exception& x) {
    return x.what();
  }
  return "unknown error";
}

// Rethrows the first failure (in item order) after collecting every message, so that the
// error is the same whatever the thread count. InputError wins over NumericalError: a trial
// point outside the domain of the input is reported as such.
void rethrow_failures(const std::vector<std::exception_ptr>& errors, const std::vector<std::string>& names) {
  std::string msg;
  std::vector<std::string> details;
  int first_input = -1, first_numerical = -1, first_other = -1, failures = 0;
  for (std::size_t i = 0; i < errors.size(); ++i) {
    if (!errors[i]) continue;
    ++failures;
    msg += (msg.empty() ? "" : "; ") + std::string("system '") + names[i] + "': " + describe_failure(errors[i]);
    try {
      std::rethrow_exception(errors[i]);
    } catch (const InputError&) {
      if (first_input < 0) first_input = static_cast<int>(i);
    } catch (const NumericalError& e) {
      if (first_numerical < 0) {
        first_numerical = static_cast<int>(i);
        details = e.details();
      }
    } catch (...) {
      if (first_other < 0) first_other = static_cast<int>(i);
    }
  }
  if (failures == 0) return;
  if (first_other >= 0) std::rethrow_exception(errors[first_other]);
  if (first_input >= 0) throw InputError(msg);
  throw NumericalError(msg, details);
}

}  // namespace

const Communicator& GradientProblem::comm() const {
  return options_.communicator ? *options_.communicator : serial_communicator();
}

std::shared_ptr<const GradientProblem::Cache> GradientProblem::solve(const Eigen::VectorXd& theta, const ScfOptions* scf) {
  if (!scf && cache_ && cache_->theta.size() == theta.size() && (cache_->theta.array() == theta.array()).all())
    return cache_;
  const auto t0 = std::chrono::steady_clock::now();
  const std::vector<SystemSpec> specs = apply_parameters(systems_, params_, theta);
  auto c = std::make_shared<Cache>();
  c->theta = theta;
  c->problems.resize(specs.size());
  c->solutions.resize(specs.size());
  c->specs = specs;
  const ScfOptions& opt = scf ? *scf : options_.scf;
  const int na = static_cast<int>(active_.size());
  c->owner = assign_by_cost(scf_cost_, comm().size());
  const auto errors = detail::distributed_for_owned(
      comm(), na, options_.threads, c->owner, scf_cost_,
      [&](int i) {
        const int s = active_[i];
        auto P = std::make_unique<KsProblem>(specs[s]);
        P->set_density_threshold(options_.density_threshold);
        const KsSolution* start = warm_[s].v_s.empty() ? nullptr : &warm_[s];
        c->solutions[s] = solve_scf(*P, opt, start);
        c->problems[s] = std::move(P);
      },
      [&](int i) { return detail::pack_solution(c->solutions[active_[i]]); },
      [&](int i, const std::string& bytes) { c->solutions[active_[i]] = detail::unpack_solution(bytes); });
  std::vector<std::string> names;
  for (int s : active_) names.push_back(systems_[s].name);
  rethrow_failures(errors, names);  // warm_ untouched on failure
  // The loss needs every system's mesh, not its whole discretization: the systems of other
  // ranks get their mesh alone (cheap, and built once), so no rank repeats their set-up.
  c->meshes.assign(specs.size(), nullptr);
  for (int s : active_) {
    if (c->problems[s]) {
      c->meshes[s] = &c->problems[s]->mesh();
      continue;
    }
    if (!meshes_[s]) meshes_[s] = std::make_shared<const Mesh>(mesh_of(systems_[s]));
    c->meshes[s] = meshes_[s].get();
  }
  for (int s : active_) warm_[s] = c->solutions[s];
  c->scf_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  if (scf) {
    cache_.reset();
    return c;
  }
  cache_ = c;
  return cache_;
}

double GradientProblem::loss(const Eigen::VectorXd& theta, const ScfOptions* scf) {
  const auto c = solve(theta, scf);
  return loss_partials(loss_, c->meshes, c->solutions, systems_).loss;
}

GradientResult GradientProblem::terms(const Eigen::VectorXd& theta) {
  GradientResult res;
  const auto c = solve(theta, nullptr);
  const Partials L = loss_partials(loss_, c->meshes, c->solutions, systems_);
  res.loss = L.loss;
  res.term_values = L.term_values;
  res.term_quantities = L.term_quantities;
  res.scf_seconds = c->scf_seconds;
  return res;
}

GradientResult GradientProblem::evaluate(const Eigen::VectorXd& theta) {
  GradientResult res;
  const auto c = solve(theta, nullptr);
  const auto t1 = std::chrono::steady_clock::now();
  const Partials L = loss_partials(loss_, c->meshes, c->solutions, systems_);
  res.loss = L.loss;
  res.term_values = L.term_values;
  res.term_quantities = L.term_quantities;
  const int np = static_cast<int>(params_.size());
  const int na = static_cast<int>(active_.size());
  // Work items: one per system, or under MPI in tangent mode (one solve per parameter) each
  // system's parameters in `chunks` contiguous blocks, so that the parameter directions are
  // shared out too. Every component is computed by the same operations either way.
  const bool tangent = options_.mode == GradientOptions::Mode::Tangent;
  const int chunks = tangent ? std::clamp(comm().size(), 1, std::max(np, 1)) : 1;
  auto block = [&](int j) { return std::pair<int, int>{(j % chunks) * np / chunks, (j % chunks + 1) * np / chunks}; };
  const int items = na * chunks;
  std::vector<Eigen::VectorXd> g(items, Eigen::VectorXd::Zero(np));
  std::vector<SolveStats> stats(items);
  // Each system's derivative where its discretization already is (the rank that solved it);
  // tangent blocks go round the ranks from there, and a rank without the system builds it.
  std::vector<int> owner(static_cast<std::size_t>(items));
  for (int j = 0; j < items; ++j) owner[j] = (c->owner[j / chunks] + j % chunks) % comm().size();
  std::vector<double> seconds;
  const auto errors = detail::distributed_for_owned(comm(), items, options_.threads, owner, seconds, [&](int j) {
    const int i = j / chunks;
    const auto [p0, p1] = block(j);
    const int s = active_[i];
    std::unique_ptr<KsProblem> here;
    if (!c->problems[s]) {
      here = std::make_unique<KsProblem>(c->specs[s]);
      here->set_density_threshold(options_.density_threshold);
    }
    const KsProblem& P = here ? *here : *c->problems[s];
    const KsSolution& S = c->solutions[s];
    // Energy part: stationarity, no solve.
    if (L.dE[s] != 0.0)
      for (int p = p0; p < p1; ++p)
        if (acts_on(params_[p], s)) g[j](p) += L.dE[s] * explicit_energy_derivative(P, S, params_[p]);
    const bool needs_response = L.dn[s].cwiseAbs().maxCoeff() > 0.0 || !L.deps[s].empty();
    if (!needs_response) return;
    const Response R(P, S, options_.response);
    std::vector<Eigen::VectorXd> dn_spin(P.nspin(), L.dn[s]);
    const Eigen::VectorXd gn = R.pack(dn_spin);
    Eigen::VectorXd geps = Eigen::VectorXd::Zero(R.size());
    for (const auto& [lv, d] : L.deps[s]) geps += d * R.eigenvalue_gradient(lv.channel, lv.state);
    if (!tangent) {
      const Eigen::VectorXd gv = R.chi0(gn) + geps;
      const Eigen::VectorXd zeta = R.solve_adjoint(gv);
      stats[j].add(R);
      const auto zs = R.unpack(zeta);
      const Eigen::VectorXd& W = P.mesh().density_weight();
      for (int p = 0; p < np; ++p) {
        if (!acts_on(params_[p], s)) continue;
        if (params_[p].kind == ParameterRef::Kind::GridPotential) {
          const int k = params_[p].index;
          for (int sp = 0; sp < P.nspin(); ++sp) g[j](p) += W(k) * zs[sp](k);
        } else {
          g[j](p) += R.dot(zeta, R.pack(parameter_potential(P, S, params_[p])));
        }
      }
    } else {
      for (int p = p0; p < p1; ++p) {
        if (!acts_on(params_[p], s)) continue;
        const Eigen::VectorXd vdot = R.solve_tangent(R.pack(parameter_potential(P, S, params_[p])));
        stats[j].add(R);
        g[j](p) += R.dot(gn, R.chi0(vdot)) + R.dot(geps, vdot);
      }
    }
  }, [&](int j) {
    detail::ByteWriter w;
    w.vec(g[j]);
    stats[j].write(w);
    return w.take();
  }, [&](int j, const std::string& bytes) {
    detail::ByteReader r = detail::message_reader(bytes);
    g[j] = r.vec();
    stats[j].read(r);
  });
  std::vector<std::string> names;
  for (int j = 0; j < items; ++j) names.push_back(systems_[active_[j / chunks]].name);
  rethrow_failures(errors, names);
  res.gradient = Eigen::VectorXd::Zero(np);
  for (int i = 0; i < na; ++i) {  // fixed order: identical sums for any thread or rank count
    // A system's blocks touch disjoint components, so joining them first changes no bit.
    Eigen::VectorXd gi = g[i * chunks];
    for (int k = 1; k < chunks; ++k) {
      const auto [p0, p1] = block(i * chunks + k);
      gi.segment(p0, p1 - p0) = g[i * chunks + k].segment(p0, p1 - p0);
    }
    res.gradient += gi;
    for (int k = 0; k < chunks; ++k) stats[i * chunks + k].add_to(res);
  }
  res.scf_seconds = c->scf_seconds;
  res.gradient_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t1).count();
  return res;
}

ResidualResult GradientProblem::residuals(const Eigen::VectorXd& theta, bool with_jacobian) {
  if (!residual_form())
    throw InputError("the residual form of the loss needs a target on every energy, energy difference and eigenvalue term");
  ResidualResult res;
  const auto c = solve(theta, nullptr);
  const auto t1 = std::chrono::steady_clock::now();
  const Partials L = loss_partials(loss_, c->meshes, c->solutions, systems_);
  res.loss = L.loss;
  res.term_values = L.term_values;
  res.term_quantities = L.term_quantities;
  const int m = num_residuals();
  const int np = static_cast<int>(params_.size());
  // Values.
  res.residuals.resize(m);
  std::vector<Eigen::VectorXd> n_total(systems_.size());
  for (int s : active_) n_total[s] = c->solutions[s].total_density();
  std::vector<LevelRef> levels(loss_.size());
  for (std::size_t t = 0; t < loss_.size(); ++t)
    if (loss_[t].kind == LossTerm::Kind::Eigenvalue) levels[t] = find_level(c->solutions[loss_[t].system], loss_[t], systems_[loss_[t].system].name);
  auto row_scale = [&](int r) {
    const LossTerm& t = loss_[row_term_[r]];
    if (t.kind != LossTerm::Kind::Density) return std::sqrt(t.weight);
    const int k = row_node_[r];
    const double reg = t.region.empty() ? 1.0 : t.region[k];
    return std::sqrt(t.weight * c->meshes[t.system]->density_weight()(k) * reg);
  };
  for (int r = 0; r < m; ++r) {
    const LossTerm& t = loss_[row_term_[r]];
    switch (t.kind) {
      case LossTerm::Kind::Density:
        res.residuals(r) = row_scale(r) * (n_total[t.system](row_node_[r]) - t.reference[row_node_[r]]);
        break;
      case LossTerm::Kind::Energy:
        res.residuals(r) = row_scale(r) * (c->solutions[t.system].energy.total - *t.target);
        break;
      case LossTerm::Kind::EnergyDifference:
        res.residuals(r) =
            row_scale(r) * (c->solutions[t.system].energy.total - c->solutions[t.system_b].energy.total - *t.target);
        break;
      case LossTerm::Kind::Eigenvalue:
        res.residuals(r) = row_scale(r) * (levels[row_term_[r]].energy - *t.target);
        break;
    }
  }
  if (!with_jacobian) {
    res.scf_seconds = c->scf_seconds;
    return res;
  }
  // Per system: dE/dtheta (stationarity) and, for systems with density or eigenvalue rows,
  // one tangent solve per parameter giving n-dot at every node and every eps-dot.
  const int na = static_cast<int>(active_.size());
  std::vector<char> needs_energy(systems_.size(), 0), needs_response(systems_.size(), 0);
  for (const LossTerm& t : loss_) {
    if (t.kind == LossTerm::Kind::Energy) needs_energy[t.system] = 1;
    if (t.kind == LossTerm::Kind::EnergyDifference) needs_energy[t.system] = needs_energy[t.system_b] = 1;
    if (t.kind == LossTerm::Kind::Density || t.kind == LossTerm::Kind::Eigenvalue) needs_response[t.system] = 1;
  }
  std::vector<Eigen::VectorXd> dE(systems_.size());
  std::vector<Eigen::MatrixXd> dn(systems_.size());          // nodes x params
  std::vector<Eigen::VectorXd> deps(loss_.size());           // per eigenvalue term
  std::vector<SolveStats> stats(na);
  std::vector<double> seconds;
  const auto errors = detail::distributed_for_owned(comm(), na, options_.threads, c->owner, seconds, [&](int i) {
    const int s = active_[i];
    const KsProblem& P = *c->problems[s];
    const KsSolution& S = c->solutions[s];
    if (needs_energy[s]) {
      dE[s] = Eigen::VectorXd::Zero(np);
      for (int p = 0; p < np; ++p)
        if (acts_on(params_[p], s)) dE[s](p) = explicit_energy_derivative(P, S, params_[p]);
    }
    if (!needs_response[s]) return;
    const Response R(P, S, options_.response);
    dn[s] = Eigen::MatrixXd::Zero(P.mesh().num_nodes(), np);
    std::vector<std::size_t> eig_terms;
    for (std::size_t t = 0; t < loss_.size(); ++t)
      if (loss_[t].kind == LossTerm::Kind::Eigenvalue && loss_[t].system == s) {
        eig_terms.push_back(t);
        deps[t] = Eigen::VectorXd::Zero(np);
      }
    std::vector<Eigen::VectorXd> eig_grad;
    for (std::size_t t : eig_terms) eig_grad.push_back(R.eigenvalue_gradient(levels[t].channel, levels[t].state));
    for (int p = 0; p < np; ++p) {
      if (!acts_on(params_[p], s)) continue;
      const Eigen::VectorXd vdot = R.solve_tangent(R.pack(parameter_potential(P, S, params_[p])));
      stats[i].add(R);
      const auto nd = R.unpack(R.chi0(vdot));
      Eigen::VectorXd tot = nd[0];
      for (std::size_t sp = 1; sp < nd.size(); ++sp) tot += nd[sp];
      dn[s].col(p) = tot;
      for (std::size_t e = 0; e < eig_terms.size(); ++e) deps[eig_terms[e]](p) = R.dot(eig_grad[e], vdot);
    }
  }, [&](int i) {
    const int s = active_[i];
    detail::ByteWriter w;
    w.vec(dE[s]);
    w.mat(dn[s]);
    for (std::size_t t = 0; t < loss_.size(); ++t)
      if (loss_[t].kind == LossTerm::Kind::Eigenvalue && loss_[t].system == s) w.vec(deps[t]);
    stats[i].write(w);
    return w.take();
  }, [&](int i, const std::string& bytes) {
    const int s = active_[i];
    detail::ByteReader r = detail::message_reader(bytes);
    dE[s] = r.vec();
    dn[s] = r.mat();
    for (std::size_t t = 0; t < loss_.size(); ++t)
      if (loss_[t].kind == LossTerm::Kind::Eigenvalue && loss_[t].system == s) deps[t] = r.vec();
    stats[i].read(r);
  });
  std::vector<std::string> names;
  for (int s : active_) names.push_back(systems_[s].name);
  rethrow_failures(errors, names);
  res.jacobian = Eigen::MatrixXd::Zero(m, np);
  for (int r = 0; r < m; ++r) {
    const int ti = row_term_[r];
    const LossTerm& t = loss_[ti];
    const double sc = row_scale(r);
    switch (t.kind) {
      case LossTerm::Kind::Density:
        res.jacobian.row(r) = sc * dn[t.system].row(row_node_[r]);
        break;
      case LossTerm::Kind::Energy:
        res.jacobian.row(r) = sc * dE[t.system].transpose();
        break;
      case LossTerm::Kind::EnergyDifference:
        res.jacobian.row(r) = sc * (dE[t.system] - dE[t.system_b]).transpose();
        break;
      case LossTerm::Kind::Eigenvalue:
        res.jacobian.row(r) = sc * deps[ti].transpose();
        break;
    }
  }
  for (const SolveStats& st : stats) st.add_to(res);
  res.scf_seconds = c->scf_seconds;
  res.gradient_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t1).count();
  return res;
}

Eigen::VectorXd GradientProblem::finite_difference_gradient(const Eigen::VectorXd& theta, const Eigen::VectorXd& steps,
                                                            const ScfOptions& tight,
                                                            const std::function<void(int, int)>& progress) {
  Eigen::VectorXd g(theta.size());
  loss(theta, &tight);  // converge the warm starts tightly at the base point first
  const std::vector<KsSolution> base = warm_;
  // Richardson extrapolation of central differences at h and h/2 cancels the h^2 error, so
  // steps large enough to keep SCF noise negligible still give 1e-8-level derivatives.
  auto central = [&](int p, double h) {
    Eigen::VectorXd a = theta, b = theta;
    a(p) += h;
    b(p) -= h;
    warm_ = base;
    const double la = loss(a, &tight);
    warm_ = base;
    const double lb = loss(b, &tight);
    return (la - lb) / (2.0 * h);
  };
  // The components are independent: under MPI each rank computes its share of them with its
  // own (serial) solves, all from the same base warm starts, so every value equals the serial one.
  const Communicator* all = options_.communicator;
  options_.communicator = nullptr;
  struct Restore {
    const Communicator*& slot;
    const Communicator* value;
    ~Restore() { slot = value; }
  } restore{options_.communicator, all};
  int done = 0;
  std::vector<double> cost(static_cast<std::size_t>(theta.size()), 1.0);
  const auto errors = detail::distributed_for(
      all ? *all : serial_communicator(), static_cast<int>(theta.size()), 1, cost,
      [&](int p) {
        const double d1 = central(p, steps(p)), d2 = central(p, 0.5 * steps(p));
        g(p) = (4.0 * d2 - d1) / 3.0;
        if (progress) progress(++done, static_cast<int>(theta.size()));
      },
      [&](int p) {
        detail::ByteWriter w;
        w.f64(g(p));
        return w.take();
      },
      [&](int p, const std::string& bytes) {
        detail::ByteReader r = detail::message_reader(bytes);
        g(p) = r.f64();
      });
  warm_ = base;
  cache_.reset();
  for (const auto& e : errors)
    if (e) std::rethrow_exception(e);
  return g;
}

}  // namespace stillpoint
