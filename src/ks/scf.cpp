#include "stillpoint/ks/scf.hpp"

#include <cmath>
#include <cstdio>
#include <exception>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"
#include "stillpoint/ks/xc_terms.hpp"

namespace stillpoint {

Eigen::VectorXd KsSolution::total_density() const {
  Eigen::VectorXd n = density[0];
  for (std::size_t s = 1; s < density.size(); ++s) n += density[s];
  return n;
}

MapEvaluation evaluate_ks_map(const KsProblem& P, const std::vector<Eigen::VectorXd>& v_in, std::vector<EigenWarmStart>& warm) {
  MapEvaluation r;
  r.states = P.solve_channels(v_in, warm);
  r.density = P.density(r.states);
  Eigen::VectorXd n_tot = r.density[0];
  for (std::size_t s = 1; s < r.density.size(); ++s) n_tot += r.density[s];
  r.v_h = P.hartree_potential(n_tot);
  XcOnMesh xc;
  try {
    xc = evaluate_xc(P.mesh(), P.xc(), r.density, P.density_threshold());
  } catch (const NonFiniteModelError& e) {
    throw e.with_position(P.mesh(), r.density);
  }
  r.v_xc = xc.potential;
  const Eigen::VectorXd& W = P.mesh().density_weight();
  EnergyParts& E = r.energy;
  for (std::size_t c = 0; c < P.channels().size(); ++c) {
    const Channel& ch = P.channels()[c];
    for (std::size_t i = 0; i < ch.occupations.size(); ++i) E.band += ch.occupations[i] * r.states[c].energies(i);
  }
  double pot = 0.0;
  for (int s = 0; s < P.nspin(); ++s) pot += W.dot(v_in[s].cwiseProduct(r.density[s]));
  E.kinetic = E.band - pot;
  E.external = W.dot(P.external_potential().cwiseProduct(n_tot));
  E.hartree = P.hartree() ? P.hartree()->energy(n_tot, r.v_h) : 0.0;
  E.xc = xc.energy;
  E.nuclear_repulsion = P.nuclear_repulsion();
  E.total = E.kinetic + E.external + E.hartree + E.xc + E.nuclear_repulsion;
  r.v_out.resize(P.nspin());
  for (int s = 0; s < P.nspin(); ++s) r.v_out[s] = P.external_potential() + r.v_h + r.v_xc[s];
  return r;
}

namespace {

Eigen::VectorXd stack(const std::vector<Eigen::VectorXd>& v) {
  Eigen::Index n = 0;
  for (const auto& x : v) n += x.size();
  Eigen::VectorXd out(n);
  Eigen::Index o = 0;
  for (const auto& x : v) {
    out.segment(o, x.size()) = x;
    o += x.size();
  }
  return out;
}

std::vector<Eigen::VectorXd> unstack(const Eigen::VectorXd& x, int nspin) {
  const Eigen::Index n = x.size() / nspin;
  std::vector<Eigen::VectorXd> out(nspin);
  for (int s = 0; s < nspin; ++s) out[s] = x.segment(s * n, n);
  return out;
}

std::string format_step(const ScfStep& s) {
  // The first iteration has no previous eigenvalues to compare with (the change is infinite).
  char change[32] = "-";
  if (std::isfinite(s.eigenvalue_change)) std::snprintf(change, sizeof change, "%.3e Ha", s.eigenvalue_change);
  char buf[160];
  std::snprintf(buf, sizeof buf, "  iter %3d  E = %.12f Ha  residual = %.3e Ha  max d(eps) = %s", s.iteration, s.energy,
                s.residual, change);
  return buf;
}

}  // namespace

std::vector<Level> labelled_levels(const KsProblem& P, const std::vector<ChannelStates>& states,
                                   const std::vector<double>& spin_shift) {
  std::vector<Level> levels;
  for (std::size_t c = 0; c < P.channels().size(); ++c) {
    const Channel& ch = P.channels()[c];
    for (int i = 0; i < ch.states; ++i) {
      Level lv;
      lv.label = ch.labels[i];
      lv.channel = static_cast<int>(c);
      lv.index = i;
      lv.spin = ch.spin;
      lv.l = ch.l;
      lv.energy = states[c].energies(i) + (spin_shift.empty() ? 0.0 : spin_shift[ch.spin]);
      lv.occupation = i < static_cast<int>(ch.occupations.size()) ? ch.occupations[i] : 0.0;
      levels.push_back(lv);
    }
  }
  return levels;
}

namespace {
// The SCF's own divergence verdict (not a failed solve inside an iteration), which the LDA
// restart below answers.
class ScfDiverged : public NumericalError {
 public:
  using NumericalError::NumericalError;
};
KsSolution solve_scf_from(const KsProblem& P, const ScfOptions& opt, const KsSolution* start);

// A failed SCF whose best iterate breaks the ripple bound is reported as what it is, an
// unstable functional for this system, instead of advice to change settings that cannot help.
// Returns normally when the bound holds (or the map cannot be evaluated there).
void throw_if_unstable(const KsProblem& P, const std::vector<Eigen::VectorXd>& best_v,
                       std::vector<EigenWarmStart> warm, const std::string& failure,
                       const std::vector<std::string>& lines, bool verbose) {
  if (!P.xc().needs_gradient()) return;
  RippleStability r;
  try {
    const MapEvaluation m = evaluate_ks_map(P, best_v, warm);
    r = ripple_stability(P.mesh(), P.xc(), m.density, P.density_threshold());
  } catch (const std::exception&) {
    return;
  }
  if (verbose)
    std::fprintf(stderr, "  ripple bound on the best iterate: 4 n d2e/dn'2 >= %.3g (unstable below -1) at r = %.3g bohr\n",
                 r.worst, r.x);
  if (r.worst >= -1.0) return;
  const bool line = P.mesh().geometry() == Geometry::Line;
  const char* x = line ? "x" : "r";
  std::ostringstream msg;
  msg.precision(3);
  msg << "functional " << xc_list_form(P.xc()) << " has no stable self-consistent solution for this system: "
      << "at " << x << " = " << r.x << " bohr (n = " << r.density << (line ? " bohr^-1" : " bohr^-3")
      << ", |n'| = " << r.gradient << ") of the best iterate, short-wavelength density ripples lower its "
      << "exchange-correlation energy faster than they raise the kinetic energy (4 n d2e/dn'2 = " << r.worst
      << "; stable down to -1, the von Weizsaecker bound), at " << r.unstable_points
      << " quadrature points from " << x << " = " << r.from << " to " << r.to
      << " bohr. No mixing, iteration limit or grid removes this; choose another functional for this system ("
      << failure << ")";
  throw UnstableFunctionalError(msg.str(), lines, r);
}
}  // namespace

// A GGA whose SCF diverges from the default start gets one more attempt from the converged LDA
// solution of the same system: early iterates of a crude start can have density tails with
// orbital nodes, where GGA potentials such as P86's reach 1e6 hartree and dig wells that trap
// ghost states (B88 + P86 on Ar). The LDA start has none. Only the path changes; the result
// is the same fixed point, and a failure of the retry reports the first attempt's error.
KsSolution solve_scf(const KsProblem& P, const ScfOptions& opt, const KsSolution* start) {
  try {
    return solve_scf_from(P, opt, start);
  } catch (const NumericalError& e) {
    // An unstable verdict also gets the retry: it was measured on the first attempt's best
    // iterate, which a crude start may have pushed into a region the fixed point avoids.
    if (!dynamic_cast<const ScfDiverged*>(&e) && !dynamic_cast<const UnstableFunctionalError*>(&e)) throw;
    if (start || !P.xc().needs_gradient()) throw;
    const std::exception_ptr first = std::current_exception();
    SystemSpec lda = P.spec();
    const bool line = lda.geometry == Geometry::Line;
    lda.xc = line ? std::vector<std::string>{"lda_x_1d_soft"} : std::vector<std::string>{"lda_x", "lda_c_pw"};
    lda.xc_weights.clear();
    lda.xc_parameters.clear();
    try {
      const KsProblem Q(lda);
      const KsSolution base = solve_scf_from(Q, opt, nullptr);
      if (opt.verbose) std::fprintf(stderr, "  SCF diverged; starting again from the converged LDA solution\n");
      return solve_scf_from(P, opt, &base);
    } catch (const UnstableFunctionalError&) {
      throw;  // the verdict that explains both failures
    } catch (const std::exception&) {
      std::rethrow_exception(first);  // the first attempt's message and history
    }
  }
}

namespace {
KsSolution solve_scf_from(const KsProblem& P, const ScfOptions& opt, const KsSolution* start) {
  const int ns = P.nspin();
  const Eigen::VectorXd& W = P.mesh().density_weight();
  std::vector<Eigen::VectorXd> v_in = start ? start->v_s : P.initial_potential();
  std::vector<EigenWarmStart> warm = start ? start->warm : std::vector<EigenWarmStart>{};
  std::vector<Eigen::VectorXd> hist_v, hist_r;
  std::vector<ScfStep> history;
  std::vector<Eigen::VectorXd> prev_eps;
  double prev_energy = std::numeric_limits<double>::quiet_NaN();
  double best_residual = std::numeric_limits<double>::infinity();
  // Divergence safeguard: the best iterate so far is kept; when the residual grows by
  // kDivergence over it (or a potential is so wild that the eigensolver fails), the SCF goes
  // back there with half the mixing and no Pulay history, at most kMaxRestarts times.
  constexpr double kDivergence = 1e3;
  constexpr int kMaxRestarts = 4;
  constexpr std::size_t kStagnation = 30;
  int last_restart = 0;
  std::vector<double> best_trail;  // best residual after each iteration
  std::vector<Eigen::VectorXd> best_v = v_in;
  std::vector<EigenWarmStart> best_warm = warm;
  int best_iteration = 0, restarts = 0;
  double mixing = opt.mixing;
  std::vector<std::string> restart_notes;
  std::vector<Eigen::VectorXd> level_change(P.channels().size());
  // Unoccupied levels get kUnoccupiedGrace iterations to settle once everything else has
  // converged; a level that still moves then (its potential weighted by no electron, e.g. Li's
  // 2s down with some GGAs) is reported with settled = false instead of failing the SCF.
  constexpr int kUnoccupiedGrace = 50;
  int rest_converged_since = 0;
  // Rounding floor (see KsSolution::residual_floor): measured once the residual has stalled
  // near the tolerance, as the difference between two evaluations of the map at the same input
  // that differ only in the eigensolver's path (warm start against cold start).
  constexpr double kFloorFactor = 3.0;
  constexpr double kFloorWindow = 1e3;  // only within this factor of the tolerance
  constexpr int kFloorStall = 10;       // iterations without a new best residual
  double floor_v = 0.0, floor_e = 0.0, floor_eps = 0.0;
  bool floor_measured = false;
  auto history_lines = [&]() {
    std::vector<std::string> lines{"SCF residual history:"};
    for (const auto& h : history) lines.push_back(format_step(h));
    for (const auto& n : restart_notes) lines.push_back(n);
    return lines;
  };
  auto restart = [&](int it, const std::string& what) {
    std::ostringstream note;
    note << "  iteration " << it << ": " << what << "; back to iteration " << best_iteration << " (residual "
         << best_residual << " Ha) with mixing " << mixing * 0.5;
    restart_notes.push_back(note.str());
    if (opt.verbose) std::fprintf(stderr, "%s\n", note.str().c_str());
    if (++restarts > kMaxRestarts || best_iteration == 0) {
      std::ostringstream msg;
      msg << "SCF diverged with functional " << xc_list_form(P.xc()) << ": " << what << " at iteration " << it
          << " (first after the best iterate, iteration " << best_iteration << ")";
      if (restarts > 1) msg << ", and " << restarts - 1 << " damped restarts did not help";
      throw_if_unstable(P, best_v, best_warm, msg.str(), history_lines(), opt.verbose);
      msg << "; try a smaller mixing or another grid";
      throw ScfDiverged(msg.str(), history_lines());
    }
    mixing *= 0.5;
    last_restart = it;
    v_in = best_v;
    warm = best_warm;
    hist_v.clear();
    hist_r.clear();
    prev_eps.clear();
    prev_energy = std::numeric_limits<double>::quiet_NaN();
  };
  for (int it = 1; it <= opt.max_iterations; ++it) {
    MapEvaluation m;
    try {
      m = evaluate_ks_map(P, v_in, warm);
    } catch (const NonFiniteModelError& e) {
      // The functional itself is undefined at a density the SCF reached: no restart helps.
      throw NumericalError(std::string(e.what()).append(" (SCF iteration ").append(std::to_string(it)).append(")"),
                           history_lines());
    } catch (const NumericalError& e) {
      if (best_iteration == 0) throw;
      restart(it, std::string("the Kohn-Sham map failed (") + e.what() + ")");
      continue;
    }
    Eigen::VectorXd n_tot = m.density[0];
    for (int s = 1; s < ns; ++s) n_tot += m.density[s];
    const double N = W.dot(n_tot);
    // Density-weighted metric: what the electrons feel, each spin's potential weighted by that
    // spin's density. (Weighting the minority potential by the total density made the SCF stall
    // for spin-polarized GGA atoms: where the minority density vanishes but the majority one
    // does not, PBE-type correlation potentials of the empty spin grow like (1 − ζ)^(−1/3) and
    // are numerical noise, felt by no electron.) The floor keeps the far tail, where only
    // unoccupied states live, from being ignored by the extrapolation.
    const int nn = static_cast<int>(n_tot.size());
    Eigen::VectorXd dens_metric(nn * ns);
    for (int s = 0; s < ns; ++s) dens_metric.segment(s * nn, nn) = W.cwiseProduct(m.density[s]) / N;
    Eigen::VectorXd metric = dens_metric;
    for (int s = 0; s < ns; ++s) metric.segment(s * nn, nn).array() += 1e-8 * W.array() / W.sum();
    const Eigen::VectorXd vin = stack(v_in);
    const Eigen::VectorXd res = stack(m.v_out) - vin;
    const double r2 = dens_metric.dot(res.cwiseProduct(res));
    ScfStep step;
    step.iteration = it;
    step.energy = m.energy.total;
    step.residual = std::sqrt(r2);
    step.eigenvalue_change = 0.0;
    double occupied_change = 0.0;
    if (!prev_eps.empty()) {
      // Every computed level counts, except those of a spin with no electrons at all (polarized
      // H's 1s down): their potential is the functional's derivative at zero density of that
      // spin, which some correlation functionals make singular (OP, ML, PK09: v ~ n^(-1/3)), so
      // they may never settle while changing nothing the SCF computes. Occupied levels must
      // settle; unoccupied ones get a grace period (below). Level::settled says which did.
      for (std::size_t c = 0; c < m.states.size(); ++c) {
        const auto& occ = P.channels()[c].occupations;
        level_change[c] = (m.states[c].energies - prev_eps[c]).cwiseAbs();
        for (int i = 0; i < level_change[c].size(); ++i) {
          const bool occupied = i < static_cast<int>(occ.size()) && occ[i] > 0.0;
          if (P.spin_electrons(P.channels()[c].spin) > 0.0)
            step.eigenvalue_change = std::max(step.eigenvalue_change, level_change[c](i));
          if (occupied) occupied_change = std::max(occupied_change, level_change[c](i));
        }
      }
    } else {
      step.eigenvalue_change = std::numeric_limits<double>::infinity();
      occupied_change = std::numeric_limits<double>::infinity();
    }
    if (!std::isfinite(step.energy) || !std::isfinite(step.residual)) {
      if (best_iteration == 0)
        throw NumericalError("SCF produced a non-finite energy or residual at iteration " + std::to_string(it) +
                                 " with functional " + xc_list_form(P.xc()),
                             history_lines());
      restart(it, "non-finite energy or residual");
      continue;
    }
    history.push_back(step);
    if (opt.verbose) std::fprintf(stderr, "%s\n", format_step(step).c_str());
    if (best_iteration > 0 && step.residual > kDivergence * best_residual) {
      std::ostringstream what;
      what << "residual " << step.residual << " Ha grew by more than " << kDivergence << " over the best";
      restart(it, what.str());
      continue;
    }
    // Stagnation (Pulay cycling between a few states) gets the same damped restart.
    // Stagnation: the best residual has not halved in kStagnation iterations (Pulay cycling, or
    // a steep tail potential that the mixing overshoots). Not near the tolerance, where
    // rounding noise alone can hold the residual up.
    best_trail.push_back(best_residual);
    const std::size_t since = static_cast<std::size_t>(it - last_restart);
    if (best_iteration > 0 && since > kStagnation && best_trail.size() > kStagnation &&
        best_residual > 1e3 * opt.potential_tolerance &&
        best_residual > 0.5 * best_trail[best_trail.size() - 1 - kStagnation]) {
      std::ostringstream what;
      what << "the best residual did not halve in " << kStagnation << " iterations";
      restart(it, what.str());
      continue;
    }
    if (!floor_measured && best_iteration > 0 && it - best_iteration >= kFloorStall &&
        step.residual >= opt.potential_tolerance && best_residual < kFloorWindow * opt.potential_tolerance) {
      floor_measured = true;
      std::vector<EigenWarmStart> cold;
      try {
        const MapEvaluation c = evaluate_ks_map(P, v_in, cold);
        const Eigen::VectorXd d = stack(c.v_out) - stack(m.v_out);
        floor_v = std::sqrt(dens_metric.dot(d.cwiseProduct(d)));
        floor_e = std::abs(c.energy.total - m.energy.total);
        for (std::size_t ch = 0; ch < m.states.size(); ++ch)
          if (P.spin_electrons(P.channels()[ch].spin) > 0.0)
            floor_eps = std::max(floor_eps, (c.states[ch].energies - m.states[ch].energies).cwiseAbs().maxCoeff());
      } catch (const NumericalError&) {
        floor_v = floor_e = floor_eps = 0.0;  // no floor known: the tolerances stand
      }
      if (!std::isfinite(floor_v) || !std::isfinite(floor_e) || !std::isfinite(floor_eps)) floor_v = floor_e = floor_eps = 0.0;
      if (opt.verbose)
        std::fprintf(stderr, "  iteration %d: residual stalled; rounding floor of the map %.2e Ha (energy %.1e Ha)\n", it,
                     floor_v, floor_e);
    }
    const double tol_v = std::max(opt.potential_tolerance, kFloorFactor * floor_v);
    const double tol_e = std::max(opt.energy_tolerance, kFloorFactor * floor_e);
    const double tol_eps = std::max(opt.eigenvalue_tolerance, kFloorFactor * floor_eps);
    const double energy_change = std::abs(step.energy - prev_energy);
    const bool rest_converged = step.residual < tol_v && energy_change < tol_e && occupied_change < tol_eps;
    const bool met_as_asked = step.residual < opt.potential_tolerance && energy_change < opt.energy_tolerance &&
                              occupied_change < opt.eigenvalue_tolerance;
    if (!rest_converged) rest_converged_since = 0;
    else if (rest_converged_since == 0) rest_converged_since = it;
    const bool converged = rest_converged && (step.eigenvalue_change < tol_eps ||
                                              it - rest_converged_since >= kUnoccupiedGrace);
    prev_eps.clear();
    for (const auto& st : m.states) prev_eps.push_back(st.energies);
    prev_energy = step.energy;
    if (converged) {
      KsSolution sol;
      sol.states = std::move(m.states);
      sol.density = std::move(m.density);
      sol.v_s = v_in;
      sol.v_xc = std::move(m.v_xc);
      sol.v_h = std::move(m.v_h);
      sol.v_ext = P.external_potential();
      sol.energy = m.energy;
      sol.history = std::move(history);
      sol.warm = warm;
      sol.iterations = it;
      sol.residual_floor = met_as_asked ? 0.0 : floor_v;
      sol.levels = labelled_levels(P, sol.states);
      for (Level& lv : sol.levels)
        if (lv.index < level_change[lv.channel].size())
          lv.settled = level_change[lv.channel](lv.index) < tol_eps;
      return sol;
    }
    // Pulay / DIIS extrapolation with a restart safeguard when the residual blows up.
    if (step.residual > 10.0 * best_residual && hist_v.size() > 1) {
      hist_v.clear();
      hist_r.clear();
    }
    if (step.residual < best_residual) {
      best_residual = step.residual;
      best_iteration = it;
      best_v = v_in;
      best_warm = warm;
    }
    hist_v.push_back(vin);
    hist_r.push_back(res);
    if (static_cast<int>(hist_v.size()) > std::max(1, opt.history)) {
      hist_v.erase(hist_v.begin());
      hist_r.erase(hist_r.begin());
    }
    const int k = static_cast<int>(hist_v.size());
    Eigen::VectorXd next;
    if (k == 1) {
      next = vin + mixing * res;
    } else {
      Eigen::MatrixXd A = Eigen::MatrixXd::Zero(k + 1, k + 1);
      Eigen::VectorXd rhs = Eigen::VectorXd::Zero(k + 1);
      for (int i = 0; i < k; ++i)
        for (int j = 0; j <= i; ++j) A(i, j) = A(j, i) = hist_r[i].dot(metric.cwiseProduct(hist_r[j]));
      const double scale = A.topLeftCorner(k, k).diagonal().maxCoeff();
      A.topLeftCorner(k, k) /= scale;
      A.topLeftCorner(k, k).diagonal().array() += 1e-12;
      A.block(0, k, k, 1).setOnes();
      A.block(k, 0, 1, k).setOnes();
      rhs(k) = 1.0;
      const Eigen::VectorXd c = A.colPivHouseholderQr().solve(rhs);
      next = Eigen::VectorXd::Zero(vin.size());
      for (int i = 0; i < k; ++i) next += c(i) * (hist_v[i] + mixing * hist_r[i]);
      if (!next.allFinite()) next = vin + mixing * res;
    }
    v_in = unstack(next, ns);
  }
  std::vector<std::string> lines = history_lines();
  std::ostringstream msg;
  if (history.empty()) throw NumericalError("SCF made no iteration", lines);
  const ScfStep& last = history.back();
  const double de = history.size() > 1 ? std::abs(last.energy - history[history.size() - 2].energy) : 0.0;
  msg << "SCF did not converge in " << opt.max_iterations << " iterations (";
  if (last.residual >= opt.potential_tolerance)
    msg << "potential residual " << last.residual << " Ha > " << opt.potential_tolerance;
  else if (de >= opt.energy_tolerance)
    msg << "energy change " << de << " Ha > " << opt.energy_tolerance;
  else
    msg << "eigenvalue change " << last.eigenvalue_change << " Ha > " << opt.eigenvalue_tolerance;
  msg << ")";
  throw_if_unstable(P, best_v, best_warm, msg.str(), lines, opt.verbose);
  msg << "; try more iterations, a smaller mixing, looser tolerances or a different grid";
  throw NumericalError(msg.str(), lines);
}
}  // namespace

}  // namespace stillpoint
