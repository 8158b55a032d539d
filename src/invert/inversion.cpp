// Kohn–Sham inversion (see include/stillpoint/inversion.hpp for the mathematics).
#include "stillpoint/invert/inversion.hpp"
#include "common/toml_input.hpp"

#include <Eigen/Cholesky>
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <numbers>
#include <sstream>

#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/xc/formula.hpp"
#include "stillpoint/numerics/hartree.hpp"
#include "stillpoint/numerics/kinetic.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"
#include "stillpoint/ks/xc_terms.hpp"
#include "numerics/interpolation.hpp"
#include "invert/methods.hpp"

namespace stillpoint {

using namespace inversion_detail;

// ---------------------------------------------------------------------------------------------
// The non-interacting map with every eigenpair
// ---------------------------------------------------------------------------------------------

namespace {

struct ChannelEigen {
  Eigen::VectorXd eps;  // all eigenvalues
  Eigen::MatrixXd c;    // all eigenvectors, scaled basis (interior nodes)
};

struct Evaluation {
  std::vector<ChannelEigen> eig;
  std::vector<ChannelStates> states;
  std::vector<Eigen::VectorXd> density;
  double band = 0.0;
};

class Engine {
 public:
  explicit Engine(const SystemSpec& spec) : P_(noninteracting(spec)) {
    const Mesh& m = P_.mesh();
    nu_ = m.num_unknowns();
    sqrt_w_ = m.w().segment(1, nu_).array().sqrt();
    for (const Channel& c : P_.channels()) {
      while (static_cast<int>(T_.size()) <= c.l) T_.push_back(Eigen::MatrixXd(scaled_kinetic(m, static_cast<int>(T_.size()))));
    }
  }
  static SystemSpec noninteracting(SystemSpec s) {
    s.line.interacting = false;
    s.xc.clear();
    s.xc_weights.clear();
    s.xc_parameters.clear();
    return s;
  }
  const KsProblem& problem() const { return P_; }
  int nu() const { return nu_; }

  Evaluation evaluate(const std::vector<Eigen::VectorXd>& v) const {
    Evaluation r;
    const Mesh& m = P_.mesh();
    for (std::size_t ci = 0; ci < P_.channels().size(); ++ci) {
      const Channel& ch = P_.channels()[ci];
      Eigen::MatrixXd H = T_[ch.l];
      H.diagonal() += v[ch.spin].segment(1, nu_);
      Eigenpairs ep = dense_lowest_eigenpairs(H, nu_);
      ChannelStates st;
      st.energies = ep.values.head(ch.states);
      st.orbitals = Eigen::MatrixXd::Zero(m.num_nodes(), ch.states);
      for (int i = 0; i < ch.states; ++i) {
        Eigen::VectorXd u = ep.vectors.col(i).cwiseQuotient(sqrt_w_);
        if (u.sum() < 0) u = -u;
        st.orbitals.col(i).segment(1, nu_) = u;
      }
      for (std::size_t i = 0; i < ch.occupations.size(); ++i) r.band += ch.occupations[i] * ep.values(i);
      r.states.push_back(std::move(st));
      r.eig.push_back({std::move(ep.values), std::move(ep.vectors)});
    }
    r.density = P_.density(r.states);
    return r;
  }

  // Pair coefficients g_ij of the response of channel ci (docs/theory.md §5.1): per occupied i,
  // 2 (f_i − f_j) / (ε_i − ε_j), every pair counted once.
  Eigen::MatrixXd pair_coefficients(const Evaluation& e, std::size_t ci) const {
    const Channel& ch = P_.channels()[ci];
    const Eigen::VectorXd& eps = e.eig[ci].eps;
    const int nocc = static_cast<int>(ch.occupations.size());
    Eigen::MatrixXd g = Eigen::MatrixXd::Zero(nu_, nocc);
    for (int i = 0; i < nocc; ++i) {
      const double fi = ch.occupations[i];
      for (int j = 0; j < nu_; ++j) {
        if (j == i) continue;
        const double fj = j < nocc ? ch.occupations[j] : 0.0;
        if (j < nocc && j < i) continue;
        if (fi == fj) continue;
        const double gap = eps(i) - eps(j);
        if (std::abs(gap) < 1e-10) {
          std::ostringstream msg;
          msg << "the response is singular: states " << ch.labels.at(std::min(i, ch.states - 1)) << " and " << j + 1
              << " of a channel are degenerate (" << gap << " Ha apart) but differently occupied; the target is not "
              << "non-interacting v-representable with these fixed occupations";
          throw NumericalError(msg.str());
        }
        g(j, i) = 2.0 * (fi - fj) / gap;
      }
    }
    return g;
  }

  /// A = diag(W) χ0 on the interior nodes of spin s.
  Eigen::MatrixXd hessian(const Evaluation& e, int s) const {
    Eigen::MatrixXd A = Eigen::MatrixXd::Zero(nu_, nu_);
    for (std::size_t ci = 0; ci < P_.channels().size(); ++ci) {
      const Channel& ch = P_.channels()[ci];
      if (ch.spin != s) continue;
      const Eigen::MatrixXd g = pair_coefficients(e, ci);
      const Eigen::MatrixXd& C = e.eig[ci].c;
      for (int i = 0; i < static_cast<int>(ch.occupations.size()); ++i) {
        if (ch.occupations[i] == 0.0) continue;
        const Eigen::MatrixXd B = (C * g.col(i).asDiagonal()) * C.transpose();
        const Eigen::VectorXd ci_vec = C.col(i);
        A.noalias() += (ci_vec * ci_vec.transpose()).cwiseProduct(B);
      }
    }
    return A;
  }

 private:
  KsProblem P_;
  int nu_ = 0;
  Eigen::VectorXd sqrt_w_;
  std::vector<Eigen::MatrixXd> T_;
};

// Stiffness matrix of the smoothness penalty ∫ |∇Δ|² (line: dx, radial: 4π r² dr) over all nodes.
Eigen::MatrixXd stiffness(const Mesh& m) {
  const int N = m.num_nodes(), p = m.degree();
  Eigen::MatrixXd K = Eigen::MatrixXd::Zero(N, N);
  const bool radial = m.geometry() == Geometry::Radial;
  for (int e = 0; e < m.num_elements(); ++e) {
    const Eigen::MatrixXd D = m.element_derivative(e);
    Eigen::VectorXd w = m.element_weights(e);
    if (radial)
      for (int q = 0; q <= p; ++q) {
        const double r = m.x()(m.node(e, q));
        w(q) *= 4.0 * std::numbers::pi * r * r;
      }
    const Eigen::MatrixXd Ke = D.transpose() * w.asDiagonal() * D;
    K.block(m.node(e, 0), m.node(e, 0), p + 1, p + 1) += Ke;
  }
  return K;
}

double edge_value(const Mesh& m, const Eigen::VectorXd& d) {
  const int N = m.num_nodes();
  return m.geometry() == Geometry::Radial ? d(N - 1) : 0.5 * (d(0) + d(N - 1));
}

struct Errors {
  double l1 = 0.0, max = 0.0;
};

Errors density_errors(const Mesh& m, const std::vector<Eigen::VectorXd>& n, const std::vector<Eigen::VectorXd>& t) {
  Errors e;
  const int first = m.geometry() == Geometry::Radial ? 1 : 0;
  for (std::size_t s = 0; s < n.size(); ++s) {
    const Eigen::VectorXd d = (n[s] - t[s]).cwiseAbs();
    e.l1 += m.density_weight().dot(d);
    e.max = std::max(e.max, d.segment(first, d.size() - first).maxCoeff());
  }
  return e;
}

}  // namespace

Eigen::VectorXd single_orbital_potential(const Mesh& mesh, const Eigen::VectorXd& n, double occupation) {
  const int nu = mesh.num_unknowns();
  const Eigen::VectorXd c = (mesh.density_weight().segment(1, nu).cwiseProduct(n.segment(1, nu)) / occupation).cwiseSqrt();
  const Eigen::VectorXd Tc = scaled_kinetic(mesh, 0) * c;
  Eigen::VectorXd v = Eigen::VectorXd::Zero(mesh.num_nodes());
  for (int k = 0; k < nu; ++k) v(k + 1) = c(k) > 0 ? -Tc(k) / c(k) : 0.0;
  return v;
}

Eigen::MatrixXd wu_yang_hessian(const SystemSpec& system, const std::vector<Eigen::VectorXd>& v, int spin) {
  const Engine E(system);
  return E.hessian(E.evaluate(v), spin);
}

// ---------------------------------------------------------------------------------------------
// The inversion
// ---------------------------------------------------------------------------------------------

InversionResult invert_density(const SystemSpec& system, const std::vector<Eigen::VectorXd>& target,
                               const InversionOptions& opt, const std::vector<bool>& covered) {
  const auto t0 = std::chrono::steady_clock::now();
  using Form = InversionOptions::Form;
  using ReferencePotential = InversionOptions::ReferencePotential;
  const Engine E(system);
  const KsProblem& P = E.problem();
  const Mesh& m = P.mesh();
  const int N = m.num_nodes(), nu = E.nu(), ns = P.nspin();
  const bool radial = m.geometry() == Geometry::Radial;
  const Eigen::VectorXd& W = m.density_weight();
  if (static_cast<int>(target.size()) != ns)
    throw InputError("the target has " + std::to_string(target.size()) + " spin densities; the system needs " +
                     std::to_string(ns));
  for (const auto& t : target)
    if (t.size() != N || !t.allFinite() || t.minCoeff() < 0)
      throw InputError("the target density must be finite and non-negative at each of the " + std::to_string(N) +
                       " grid nodes");
  const bool per_spin = !opt.spin_ionization_energies.empty();
  if (per_spin) {
    if (opt.constant != InversionOptions::Constant::Ionization)
      throw InputError("ionization energies per spin are used only with constant = \"ionization\"");
    if (static_cast<int>(opt.spin_ionization_energies.size()) != ns)
      throw InputError("ionization energies per spin: the system has " + std::to_string(ns) + " spin channel" +
                       (ns == 1 ? "" : "s") + ", " + std::to_string(opt.spin_ionization_energies.size()) + " were given");
    for (double I : opt.spin_ionization_energies)
      if (!std::isfinite(I)) throw InputError("ionization energies per spin must be finite (hartree)");
  } else if (opt.constant == InversionOptions::Constant::Ionization && !(std::isfinite(opt.ionization_energy))) {
    throw InputError("constant = \"ionization\" needs a finite ionization_energy (hartree)");
  }
  if (opt.regularization < 0 || !(opt.density_tolerance > 0) || !(opt.trust_threshold >= 0) ||
      !(opt.regularization_factor > 1) || !(opt.regularization_start > 0))
    throw InputError("inversion options out of range (regularization >= 0, density_tolerance > 0, factor > 1)");

  // Target, normalized per spin exactly to the occupations (the constant direction must be a
  // null direction of the objective), with nothing at the Dirichlet nodes.
  const std::vector<double> Ns = electrons_per_spin(system);
  std::vector<Eigen::VectorXd> nt = target;
  Eigen::VectorXd nt_tot = Eigen::VectorXd::Zero(N);
  for (int s = 0; s < ns; ++s) {
    nt[s](N - 1) = 0.0;
    if (!radial) nt[s](0) = 0.0;
    const double got = W.dot(nt[s]);
    if (!(got > 0)) throw InputError("the target density is zero on the grid");
    nt[s] *= Ns[s] / got;
    nt_tot += nt[s];
  }
  const double Ntot = W.dot(nt_tot);

  InversionResult R;
  R.target = nt;
  R.v_ext = P.external_potential();
  R.v_h = Eigen::VectorXd::Zero(N);
  const bool need_h = opt.form == Form::Interacting || opt.reference_potential != ReferencePotential::ExternalOnly;
  if (need_h) {
    const Hartree H(m, radial ? 0.0 : system.line.electron_softening);
    R.v_h = H.potential(nt_tot);
  }
  Eigen::VectorXd vg = R.v_ext;
  if (opt.reference_potential == ReferencePotential::FermiAmaldi) vg += ((Ntot - 1.0) / Ntot) * R.v_h;
  if (opt.reference_potential == ReferencePotential::ExternalAndHartree) vg += R.v_h;
  if (radial) vg(0) = vg(1);  // r = 0 carries no weight; keep the vector finite and smooth-ish
  R.v_reference.assign(ns, vg);

  const Eigen::MatrixXd K = stiffness(m);
  std::vector<Eigen::VectorXd> delta(ns, Eigen::VectorXd::Zero(N));
  auto potentials = [&](const std::vector<Eigen::VectorXd>& d) {
    std::vector<Eigen::VectorXd> v(ns);
    for (int s = 0; s < ns; ++s) v[s] = vg + d[s];
    return v;
  };
  const bool wy = opt.method == InversionOptions::Method::WuYang;
  // Objective to minimize: Wu–Yang: −W(v) + penalty; direct: ½‖n − n_t‖² + penalty.
  auto objective = [&](const Evaluation& ev, const std::vector<Eigen::VectorXd>& d, double alpha) {
    double J = 0.0;
    if (wy) {
      std::vector<Eigen::VectorXd> v(ns);
      for (int s = 0; s < ns; ++s) v[s] = vg + d[s];
      J = wu_yang_objective(ev.band, W, v, nt);
    } else {
      J = direct_objective(W, ev.density, nt);
    }
    for (int s = 0; s < ns; ++s) J += 0.5 * alpha * d[s].dot(K * d[s]);
    return J;
  };

  Evaluation ev = E.evaluate(potentials(delta));
  const bool automatic = opt.regularization == 0.0;
  double alpha = automatic ? opt.regularization_start : opt.regularization;
  int iteration = 0;
  Errors err = density_errors(m, ev.density, nt);
  std::vector<std::string> history_lines;
  auto note = [&](const InversionStep& st) {
    char buf[200];
    std::snprintf(buf, sizeof buf, "  iter %3d  alpha %.1e  objective %.12e  int|n-n_t| %.3e  max|n-n_t| %.3e  step %.3f%s",
                  st.iteration, st.regularization, st.objective, st.density_l1, st.density_max, st.step,
                  wy ? "" : ("  cg " + std::to_string(st.krylov_iterations)).c_str());
    history_lines.emplace_back(buf);
    if (opt.progress) opt.progress(buf);
  };
  bool done = false;
  while (!done) {
    // Newton (Wu–Yang) or Gauss–Newton (direct) iterations at this α until they stall.
    double J = objective(ev, delta, alpha);
    int stalled = 0;
    for (int inner = 0; inner < 100; ++inner) {
      if (iteration >= opt.max_iterations) break;
      ++iteration;
      std::vector<Eigen::VectorXd> step(ns);
      std::vector<Eigen::VectorXd> grad(ns);
      int krylov = 0;
      double decrement = 0.0;
      for (int s = 0; s < ns; ++s) {
        const Eigen::MatrixXd A = E.hessian(ev, s);  // interior block, negative semi-definite
        const Eigen::VectorXd r = (ev.density[s] - nt[s]).segment(1, nu);
        Eigen::VectorXd d, g;
        if (wy) {
          wu_yang_step(A, r, W, K, delta[s], alpha, d, g);
        } else {
          krylov += direct_step(A, r, W, K, delta[s], alpha, J, opt.max_krylov_iterations, d, g);
        }
        decrement += -g.dot(d);
        step[s] = d;
        grad[s] = g;
      }
      // Converged at this α when the optimality residual is far below the density accuracy
      // asked for (Wu–Yang: the gradient is W (n − n_t) − αKΔ, in electrons), or the predicted
      // decrease is at the rounding level of the objective. The decrease is quadratic in the
      // gradient: for a diffuse density a density error of 1e-8 predicts a decrease at rounding
      // level while the step still moves the density by the whole error. So every new α gets
      // at least one Newton step (taken as a local step below) before the decrement may stop it.
      const double rounding = 1e-15 * (1.0 + std::abs(J));
      double gnorm = 0.0;
      for (int s = 0; s < ns; ++s) gnorm += grad[s].lpNorm<1>();
      if ((inner > 0 && decrement < rounding) || (wy && gnorm < 1e-3 * opt.density_tolerance)) {
        --iteration;
        break;
      }
      // Far from the optimum: backtracking (Armijo) line search on the convex objective. Close
      // to it the objective's changes approach its rounding, so full Newton steps are taken as
      // long as they keep reducing the density error or the gradient.
      const bool local = decrement < 1e-9 * (1.0 + std::abs(J));
      double t = 1.0;
      std::vector<Eigen::VectorXd> trial(ns);
      Evaluation evt;
      double Jt = 0.0;
      bool accepted = false;
      for (int ls = 0; ls < 30; ++ls) {
        for (int s = 0; s < ns; ++s) trial[s] = delta[s] + t * step[s];
        evt = E.evaluate(potentials(trial));
        Jt = objective(evt, trial, alpha);
        if (std::isfinite(Jt) && (local || Jt <= J - 1e-4 * t * decrement)) {
          accepted = true;
          break;
        }
        t *= 0.5;
      }
      const Errors before = err;
      if (accepted) {
        delta = trial;
        ev = std::move(evt);
        J = Jt;
      }
      err = density_errors(m, ev.density, nt);
      InversionStep st{iteration, alpha, J, err.l1, err.max, accepted ? t : 0.0, krylov};
      R.history.push_back(st);
      note(st);
      if (!accepted) break;
      // Stalled: a local step that no longer changes the density error.
      if (local && std::abs(err.l1 - before.l1) <= 1e-3 * err.l1) {
        if (++stalled >= 2) break;
      } else {
        stalled = 0;
      }
    }
    if (!automatic || err.l1 <= opt.density_tolerance || iteration >= opt.max_iterations) {
      done = true;
    } else if (alpha <= opt.regularization_min * (1.0 + 1e-12)) {
      done = true;
    } else {
      // The density error of the regularized maximum grows linearly with α: aim at half the
      // tolerance, but never by more than three decades, nor less than one factor, at once.
      const double predicted = 0.5 * opt.density_tolerance / std::max(err.l1, 1e-300);
      alpha *= std::clamp(predicted, 1e-3, 1.0 / opt.regularization_factor);
      alpha = std::max(alpha, opt.regularization_min);
    }
  }
  R.iterations = iteration;
  R.regularization = alpha;
  R.density_l1 = err.l1;
  R.density_max = err.max;
  if (!(err.l1 <= opt.density_tolerance)) {
    std::ostringstream msg;
    msg << "the inversion reached a density error of " << err.l1 << " electrons (int |n - n_t|), not the requested "
        << opt.density_tolerance << ", after " << iteration << " iterations (regularization " << alpha << ")";
    if (!automatic) msg << "; use regularization = \"auto\" or a smaller value";
    else if (iteration >= opt.max_iterations) msg << "; raise max_iterations";
    else msg << "; the target may not be reproducible on this grid with these occupations: raise density_tolerance, "
                "refine the grid, or check the target";
    throw NumericalError(msg.str(), [&] {
      std::vector<std::string> lines{"inversion history (density errors in electrons, objective in hartree):"};
      lines.insert(lines.end(), history_lines.begin(), history_lines.end());
      return lines;
    }());
  }

  // The constant of each spin.
  R.shift.assign(ns, 0.0);
  double homo = -std::numeric_limits<double>::infinity();
  int homo_spin = 0;
  std::vector<double> spin_homo(ns, -std::numeric_limits<double>::infinity());
  for (std::size_t ci = 0; ci < P.channels().size(); ++ci) {
    const Channel& ch = P.channels()[ci];
    for (std::size_t i = 0; i < ch.occupations.size(); ++i)
      if (ch.occupations[i] > 0) {
        spin_homo[ch.spin] = std::max(spin_homo[ch.spin], ev.states[ci].energies(i));
        if (ev.states[ci].energies(i) > homo) {
          homo = ev.states[ci].energies(i);
          homo_spin = ch.spin;
        }
      }
  }
  if (opt.constant == InversionOptions::Constant::Asymptotic) {
    for (int s = 0; s < ns; ++s) R.shift[s] = -edge_value(m, delta[s]);
  } else if (per_spin) {
    for (int s = 0; s < ns; ++s) {
      if (!std::isfinite(spin_homo[s]))
        throw InputError("an ionization energy was given for spin " + std::string(s == 0 ? "up" : "down") +
                         ", which holds no electrons; give one per occupied spin or a single ionization_energy");
      R.shift[s] = -opt.spin_ionization_energies[s] - spin_homo[s];
    }
  } else {
    R.shift[homo_spin] = -opt.ionization_energy - homo;
    for (int s = 0; s < ns; ++s)
      if (s != homo_spin) R.shift[s] = edge_value(m, delta[homo_spin]) + R.shift[homo_spin] - edge_value(m, delta[s]);
  }
  if (!radial) {
    for (int s = 0; s < ns; ++s) R.tail_mismatch = std::max(R.tail_mismatch, std::abs(delta[s](0) - delta[s](N - 1)));
  }
  R.homo = -std::numeric_limits<double>::infinity();
  for (int s = 0; s < ns; ++s)
    if (std::isfinite(spin_homo[s])) R.homo = std::max(R.homo, spin_homo[s] + R.shift[s]);
  R.v_s.resize(ns);
  for (int s = 0; s < ns; ++s) {
    R.v_s[s] = vg + delta[s];
    R.v_s[s].array() += R.shift[s];
    if (radial) R.v_s[s](0) = R.v_s[s](1);
  }
  if (opt.form == Form::Interacting) {
    for (int s = 0; s < ns; ++s) {
      R.v_hxc.push_back(R.v_s[s] - R.v_ext);
      R.v_xc.push_back(R.v_s[s] - R.v_ext - R.v_h);
      if (radial) {
        R.v_hxc.back()(0) = R.v_hxc.back()(1);
        R.v_xc.back()(0) = R.v_xc.back()(1);
      }
    }
  }
  R.density = ev.density;
  R.levels = labelled_levels(P, ev.states, R.shift);
  // The model functional on the target density, for comparison.
  if (!system.xc.empty() && opt.form == Form::Interacting) {
    XcSettings xs;
    xs.one_dimensional = !radial;
    xs.softening = system.line.electron_softening;
    xs.density_threshold = system.density_threshold;
    for (const FormulaSpec& f : system.formulas) xs.formulas.push_back(compile_formula(f));
    XcFunctional xc = make_functional(system.xc, xs, system.xc_parameters);
    if (!system.xc_weights.empty())
      for (std::size_t i = 0; i < xc.size() && i < system.xc_weights.size(); ++i)
        xc.set_weight(i, xc.weight(i) * system.xc_weights[i]);
    if (!xc.empty()) {
      XcOnMesh model;
      try {
        model = evaluate_xc(m, xc, nt, system.density_threshold);
      } catch (const NonFiniteModelError& e) {
        throw e.with_position(m, nt);
      }
      R.v_xc_model = model.potential;
      for (auto& v : R.v_xc_model)
        if (radial) v(0) = v(1);
      R.model_functional = xc_list_form(xc);
    }
  }
  R.trusted.assign(N, false);
  for (int k = 0; k < N; ++k)
    R.trusted[k] = nt_tot(k) > opt.trust_threshold && (covered.empty() || covered[k]) && !(radial && k == 0);
  R.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  // Nothing non-finite leaves this function.
  auto finite = [](const std::vector<Eigen::VectorXd>& vs) {
    return std::all_of(vs.begin(), vs.end(), [](const Eigen::VectorXd& v) { return v.allFinite(); });
  };
  if (!finite(R.v_s) || !finite(R.v_xc) || !finite(R.density) || !finite(R.v_xc_model) || !R.v_h.allFinite() ||
      !std::isfinite(R.homo))
    throw NumericalError("the reconstructed potential contains NaN or Inf");
  return R;
}

}  // namespace stillpoint
