#include "stillpoint/response/response.hpp"

#include <Eigen/SparseCholesky>
#include <algorithm>
#include <cmath>
#include <limits>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/band_lu.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace stillpoint {

namespace {
using SpMat = Eigen::SparseMatrix<double>;
using Ldlt = Eigen::SimplicialLDLT<SpMat, Eigen::Lower, Eigen::NaturalOrdering<int>>;

struct ChannelData {
  int spin = 0;
  std::vector<double> occ;     // per computed state (0 beyond the occupied ones)
  Eigen::VectorXd eps;         // computed states
  Eigen::MatrixXd c;           // computed states, scaled basis (interior), orthonormal
  // Sum over states: every eigenpair of the channel.
  Eigen::VectorXd eps_all;
  Eigen::MatrixXd c_all;
  // Sternheimer: H~, per occupied state the banded LU of H~ - (eps_i - delta_i) (empty where
  // unusable), and for those states a positive-definite (H~ - sigma)^{-1} below the spectrum.
  SpMat H;
  std::unique_ptr<Ldlt> precond;
  std::vector<BandLuFactor> near;
};
}  // namespace

struct Response::Impl {
  const KsProblem* P = nullptr;
  ResponseOptions opt;
  int ns = 1, nu = 0;
  Eigen::VectorXd Wi;  // density weights at interior nodes
  std::vector<ChannelData> ch;
  bool sos = true;
  std::unique_ptr<XcKernel> kxc;
  mutable int last_iterations = 0;
  mutable double last_residual = 0.0;

  Eigen::VectorXd gmres(const Eigen::VectorXd& b, bool adjoint, const Response& R) const;
};

Response::Response(const KsProblem& P, const KsSolution& S, ResponseOptions opt) : impl_(std::make_unique<Impl>()) {
  Impl& I = *impl_;
  I.P = &P;
  I.opt = opt;
  I.ns = P.nspin();
  const Mesh& m = P.mesh();
  I.nu = m.num_unknowns();
  I.Wi = m.density_weight().segment(1, I.nu);
  const Eigen::VectorXd sqrt_w = m.w().segment(1, I.nu).array().sqrt();
  I.sos = opt.chi0 == ResponseOptions::Chi0Method::SumOverStates ||
          (opt.chi0 == ResponseOptions::Chi0Method::Automatic && I.nu <= opt.sum_over_states_below);
  for (std::size_t c = 0; c < P.channels().size(); ++c) {
    const Channel& chan = P.channels()[c];
    ChannelData d;
    d.spin = chan.spin;
    d.eps = S.states[c].energies;
    const int k = static_cast<int>(d.eps.size());
    d.occ.assign(k, 0.0);
    for (std::size_t i = 0; i < chan.occupations.size(); ++i) d.occ[i] = chan.occupations[i];
    d.c.resize(I.nu, k);
    for (int i = 0; i < k; ++i) d.c.col(i) = S.states[c].orbitals.col(i).segment(1, I.nu).cwiseProduct(sqrt_w);
    // Ill-posed derivative: nearly degenerate states with different occupations.
    for (int i = 0; i < k; ++i)
      for (int j = i + 1; j < k; ++j)
        if (std::abs(d.eps(i) - d.eps(j)) < opt.degeneracy_tolerance && std::abs(d.occ[i] - d.occ[j]) > 1e-12) {
          std::ostringstream msg;
          msg << "the derivative is ill-posed: states " << chan.labels[i] << " and " << chan.labels[j] << " (spin " << chan.spin
              << ") differ in energy by only " << std::abs(d.eps(i) - d.eps(j)) << " Ha but have occupations "
              << d.occ[i] << " and " << d.occ[j];
          throw NumericalError(msg.str());
        }
    d.H = P.kinetic(chan.l);
    for (int i = 0; i < I.nu; ++i) d.H.coeffRef(i, i) += S.v_s[chan.spin](i + 1);
    if (I.sos) {
      const Eigenpairs all = dense_lowest_eigenpairs(Eigen::MatrixXd(d.H), I.nu);
      d.eps_all = all.values;
      d.c_all = all.vectors;
      // Use the converged SCF states for the occupied ones so chi0 is consistent with the
      // reported solution; the dense pairs agree with them to solver precision.
    } else {
      // Just below eps_i, (H~ - mu)^{-1} on the complement of the computed states has
      // eigenvalues 1/(lambda_j - eps_i + delta): against H~ - eps_i there the preconditioned
      // spectrum lies in [g / (g + delta), 1] (g: the gap to the first state not computed), so
      // PCG gains about a factor delta / (4 g) per step: the smaller the shift, the fewer steps
      // (7 at delta = g / 20 to reach 1e-13, 2 at delta = 1e-6 |eps_i|). The shift may not come
      // near the accuracy of the computed pair itself: along the true eigenvector the factor
      // amplifies by 1 / delta what the projection with the computed c_i leaves, i.e. the
      // pair's residual rho_i. Kept at 1e4 rho_i, that leak stays below 1e-4 of the solution
      // on the component the projection removes, where CG only needs the preconditioner
      // symmetric and positive. A quarter of the distance to the state below keeps the factor
      // well conditioned on the directions the projection removes anyway.
      int kd = 0;
      for (int j = 0; j < d.H.outerSize(); ++j)
        for (SpMat::InnerIterator it(d.H, j); it; ++it) kd = std::max(kd, std::abs(static_cast<int>(it.row()) - j));
      d.near.resize(k);
      // The state below leaks the same way with 1 / (its distance to mu): one bound for all.
      double rho = 0.0;
      for (int i = 0; i < k; ++i) rho = std::max(rho, (d.H * d.c.col(i) - d.eps(i) * d.c.col(i)).norm());
      for (int i = 0; i < k; ++i) {
        if (d.occ[i] == 0.0) continue;
        const double scale = std::max(std::abs(d.eps(i)), 0.2);
        double delta = std::min(std::max(1e-6 * scale, 1e4 * rho), 0.05 * scale);
        if (i > 0) delta = std::min(delta, 0.25 * (d.eps(i) - d.eps(i - 1)));
        // Near-degenerate with the state below, or a poorly converged pair: the shift below
        // the spectrum.
        if (!(delta > 1e3 * rho && delta > 1e-9 * scale)) continue;
        BandLuFactor& f = d.near[i];
        f.reset(I.nu, kd, kd);
        for (int j = 0; j < d.H.outerSize(); ++j)
          for (SpMat::InnerIterator it(d.H, j); it; ++it)
            f.at(static_cast<int>(it.row()), j) = it.value() - (it.row() == j ? d.eps(i) - delta : 0.0);
        if (f.factor() != 0) f = BandLuFactor{};
      }
      // States without one (near-degenerate, or an exactly singular factor) use a shift below
      // the whole spectrum, where H~ - sigma is positive definite.
      bool all_near = true;
      for (int i = 0; i < k; ++i) all_near = all_near && (d.occ[i] == 0.0 || d.near[i].n > 0);
      if (!all_near) {
        double sigma = d.eps(0) - std::max(0.05, 0.05 * std::abs(d.eps(0)));
        for (int tries = 0; tries < 60; ++tries) {
          SpMat A = d.H;
          for (int i = 0; i < I.nu; ++i) A.coeffRef(i, i) -= sigma;
          d.precond = std::make_unique<Ldlt>(A);
          if (d.precond->info() == Eigen::Success && (d.precond->vectorD().array() > 0).all()) break;
          sigma -= std::max(1.0, std::abs(sigma));
        }
      }
    }
    I.ch.push_back(std::move(d));
  }
  if (!P.xc().empty()) {
    try {
      I.kxc = std::make_unique<XcKernel>(m, P.xc(), S.density, P.density_threshold());
    } catch (const NonFiniteModelError& e) {
      throw e.with_position(m, S.density);
    }
  }
}

Response::~Response() = default;

int Response::size() const { return impl_->ns * impl_->nu; }
int Response::nspin() const { return impl_->ns; }
int Response::interior() const { return impl_->nu; }

double Response::dot(const Eigen::VectorXd& a, const Eigen::VectorXd& b) const {
  const Impl& I = *impl_;
  double s = 0.0;
  for (int sp = 0; sp < I.ns; ++sp)
    s += (I.Wi.array() * a.segment(sp * I.nu, I.nu).array() * b.segment(sp * I.nu, I.nu).array()).sum();
  return s;
}

Eigen::VectorXd Response::pack(const std::vector<Eigen::VectorXd>& v) const {
  const Impl& I = *impl_;
  Eigen::VectorXd out(I.ns * I.nu);
  for (int s = 0; s < I.ns; ++s) out.segment(s * I.nu, I.nu) = v[s].segment(1, I.nu);
  return out;
}

std::vector<Eigen::VectorXd> Response::unpack(const Eigen::VectorXd& x) const {
  const Impl& I = *impl_;
  std::vector<Eigen::VectorXd> out(I.ns, Eigen::VectorXd::Zero(I.nu + 2));
  for (int s = 0; s < I.ns; ++s) out[s].segment(1, I.nu) = x.segment(s * I.nu, I.nu);
  return out;
}

Eigen::VectorXd Response::chi0(const Eigen::VectorXd& dv) const {
  return impl_->sos ? chi0_sum_over_states(dv) : chi0_sternheimer(dv);
}

Eigen::VectorXd Response::chi0_sum_over_states(const Eigen::VectorXd& dv) const {
  const Impl& I = *impl_;
  Eigen::VectorXd out = Eigen::VectorXd::Zero(I.ns * I.nu);
  for (const ChannelData& d : I.ch) {
    Eigenpairs all;
    const Eigen::MatrixXd* C = &d.c_all;
    Eigen::MatrixXd tmp;
    if (d.c_all.size() == 0) {
      all = dense_lowest_eigenpairs(Eigen::MatrixXd(d.H), I.nu);
      tmp = all.vectors;
      C = &tmp;
    }
    const Eigen::VectorXd& eps = d.c_all.size() ? d.eps_all : all.values;
    const auto dvs = dv.segment(d.spin * I.nu, I.nu);
    Eigen::VectorXd acc = Eigen::VectorXd::Zero(I.nu);
    const int nall = static_cast<int>(eps.size());
    for (int i = 0; i < static_cast<int>(d.occ.size()); ++i) {
      const double fi = d.occ[i];
      if (fi == 0.0) continue;
      const Eigen::VectorXd ci = C->col(i);
      const Eigen::VectorXd Mi = C->transpose() * dvs.cwiseProduct(ci);
      Eigen::VectorXd coef = Eigen::VectorXd::Zero(nall);
      for (int j = 0; j < nall; ++j) {
        if (j == i) continue;
        const double fj = j < static_cast<int>(d.occ.size()) ? d.occ[j] : 0.0;
        if (fj != 0.0 && j < i) continue;  // occupied pairs are counted once, from the lower state
        if (fi == fj) continue;
        coef(j) = 2.0 * Mi(j) * (fi - fj) / (eps(i) - eps(j));
      }
      acc += ci.cwiseProduct(*C * coef);
    }
    out.segment(d.spin * I.nu, I.nu) += acc.cwiseQuotient(I.Wi);
  }
  return out;
}

Eigen::VectorXd Response::chi0_sternheimer(const Eigen::VectorXd& dv, double tolerance) const {
  const Impl& I = *impl_;
  const double tol = tolerance < 0.0 ? I.opt.sternheimer_tolerance : tolerance;
  Eigen::VectorXd out = Eigen::VectorXd::Zero(I.ns * I.nu);
  for (const ChannelData& d : I.ch) {
    const auto dvs = dv.segment(d.spin * I.nu, I.nu);
    const int k = static_cast<int>(d.eps.size());
    auto project = [&](Eigen::VectorXd& x) { x -= d.c * (d.c.transpose() * x); };
    Eigen::VectorXd acc = Eigen::VectorXd::Zero(I.nu);
    for (int i = 0; i < k; ++i) {
      const double fi = d.occ[i];
      if (fi == 0.0) continue;
      const Eigen::VectorXd ci = d.c.col(i);
      const Eigen::VectorXd dvci = dvs.cwiseProduct(ci);
      // Inside the computed states: explicit pairs.
      const Eigen::VectorXd Mi = d.c.transpose() * dvci;
      Eigen::VectorXd coef = Eigen::VectorXd::Zero(k);
      for (int j = 0; j < k; ++j) {
        if (j == i) continue;
        const double fj = d.occ[j];
        if (fj != 0.0 && j < i) continue;
        if (fi == fj) continue;
        coef(j) = 2.0 * Mi(j) * (fi - fj) / (d.eps(i) - d.eps(j));
      }
      acc += ci.cwiseProduct(d.c * coef);
      // Outside: (H - eps_i) psi = -P dv c_i in the complement, by projected preconditioned CG.
      Eigen::VectorXd rhs = -dvci;
      project(rhs);
      // The tolerance is relative to the perturbation dv c_i, not to its projection: where the
      // computed states span dv c_i (x^2 times the lowest state of a harmonic trap lies in the
      // span of its levels 0 and 2), the projection is rounding noise that no CG can reduce.
      const double bnorm = dvci.norm();
      if (!(rhs.norm() > tol * bnorm)) continue;
      Eigen::VectorXd psi = Eigen::VectorXd::Zero(I.nu), r = rhs;
      const BandLuFactor* near = d.near[i].n > 0 ? &d.near[i] : nullptr;
      if (!near && !d.precond) throw std::logic_error("Sternheimer preconditioner missing");
      auto precondition = [&](const Eigen::VectorXd& v) {
        if (!near) return Eigen::VectorXd(d.precond->solve(v));
        Eigen::VectorXd out = v;
        near->solve(out.data());
        return out;
      };
      Eigen::VectorXd z = precondition(r);
      project(z);
      Eigen::VectorXd p = z;
      double rz = r.dot(z);
      bool conv = false;
      for (int it = 0; it < I.opt.sternheimer_max_iterations; ++it) {
        Eigen::VectorXd Ap = d.H * p - d.eps(i) * p;
        project(Ap);
        const double alpha = rz / p.dot(Ap);
        psi += alpha * p;
        r -= alpha * Ap;
        if (r.norm() <= tol * bnorm) {
          conv = true;
          break;
        }
        z = precondition(r);
        project(z);
        const double rz_new = r.dot(z);
        p = z + (rz_new / rz) * p;
        rz = rz_new;
      }
      if (!conv) {
        std::ostringstream msg;
        msg << "Sternheimer CG did not converge for state " << i << " (relative residual " << r.norm() / bnorm
            << " after " << I.opt.sternheimer_max_iterations << " iterations)";
        throw NumericalError(msg.str());
      }
      acc += 2.0 * fi * ci.cwiseProduct(psi);
    }
    out.segment(d.spin * I.nu, I.nu) += acc.cwiseQuotient(I.Wi);
  }
  return out;
}

Eigen::VectorXd Response::kernel(const Eigen::VectorXd& dn) const {
  const Impl& I = *impl_;
  const std::vector<Eigen::VectorXd> n = unpack(dn);
  Eigen::VectorXd ntot = n[0];
  for (int s = 1; s < I.ns; ++s) ntot += n[s];
  const Eigen::VectorXd vh = I.P->hartree_potential(ntot);
  std::vector<Eigen::VectorXd> v(I.ns, vh);
  if (I.kxc) {
    const auto vx = I.kxc->apply(n);
    for (int s = 0; s < I.ns; ++s) v[s] += vx[s];
  }
  return pack(v);
}

Eigen::VectorXd Response::eigenvalue_gradient(int channel, int state) const {
  const Impl& I = *impl_;
  const ChannelData& d = I.ch.at(channel);
  Eigen::VectorXd g = Eigen::VectorXd::Zero(I.ns * I.nu);
  g.segment(d.spin * I.nu, I.nu) = d.c.col(state).array().square() / I.Wi.array();
  return g;
}

Eigen::VectorXd Response::Impl::gmres(const Eigen::VectorXd& b, bool adjoint, const Response& R) const {
  // inner < 0: chi0 at its own tolerance (true residuals); otherwise the Sternheimer solves may
  // stop at `inner` (sum over states is exact and ignores it).
  auto A = [&](const Eigen::VectorXd& x, double inner = -1.0) -> Eigen::VectorXd {
    auto chi = [&](const Eigen::VectorXd& v) { return sos || inner < 0.0 ? R.chi0(v) : R.chi0_sternheimer(v, inner); };
    return adjoint ? Eigen::VectorXd(x - chi(R.kernel(x))) : Eigen::VectorXd(x - R.kernel(chi(x)));
  };
  // Relaxed inexact GMRES (Bouras and Fraysse 2005; Simoncini and Szyld 2003): an error of
  // size eta in the j-th product perturbs the solution by about eta times the residual
  // reached by then, so eta may grow like tolerance / residual.
  auto inner_tolerance = [&](double residual) {
    if (!opt.relaxed_inner_tolerance) return -1.0;
    const double t = opt.sternheimer_tolerance;
    return std::clamp(0.1 * opt.krylov_tolerance / std::max(residual, 1e-300), t, std::max(t, 1e-4));
  };
  const int n = static_cast<int>(b.size());
  const int m = std::min(60, n);
  Eigen::VectorXd x = Eigen::VectorXd::Zero(n);
  const double bnorm = std::sqrt(R.dot(b, b));
  last_iterations = 0;
  last_residual = 0.0;
  if (bnorm == 0.0) return x;
  std::vector<std::string> history{"GMRES residual history:"};
  int total = 0;
  double previous_true = std::numeric_limits<double>::infinity();
  for (int restart = 0; total < opt.krylov_max_iterations; ++restart) {
    // x = 0 on the first pass: r = b without a chi0 product at full tolerance.
    Eigen::VectorXd r = restart == 0 ? b : Eigen::VectorXd(b - A(x));
    const double beta = std::sqrt(R.dot(r, r));
    const double true_res = beta / bnorm;
    last_residual = true_res;
    if (true_res <= opt.krylov_tolerance) return x;
    // The recurrence can converge below what the operator's rounding allows (huge kernels in
    // the far tail); when a restart no longer improves the true residual, stop there and
    // accept it if it is below the floor.
    if (restart > 0 && true_res > 0.5 * previous_true) {
      if (true_res <= opt.krylov_floor) return x;
      break;
    }
    previous_true = true_res;
    std::vector<Eigen::VectorXd> V{r / beta};
    Eigen::MatrixXd H = Eigen::MatrixXd::Zero(m + 1, m);
    Eigen::VectorXd g = Eigen::VectorXd::Zero(m + 1);
    g(0) = beta;
    std::vector<double> cs(m), sn(m);
    int j = 0;
    double estimate = true_res;  // the recurrence's relative residual so far
    for (; j < m && total < opt.krylov_max_iterations; ++total) {
      Eigen::VectorXd w = A(V[j], inner_tolerance(estimate));
      for (int i = 0; i <= j; ++i) {
        H(i, j) = R.dot(w, V[i]);
        w -= H(i, j) * V[i];
      }
      const double hn = std::sqrt(R.dot(w, w));
      H(j + 1, j) = hn;
      for (int i = 0; i < j; ++i) {
        const double t = cs[i] * H(i, j) + sn[i] * H(i + 1, j);
        H(i + 1, j) = -sn[i] * H(i, j) + cs[i] * H(i + 1, j);
        H(i, j) = t;
      }
      const double den = std::hypot(H(j, j), H(j + 1, j));
      cs[j] = H(j, j) / den;
      sn[j] = H(j + 1, j) / den;
      H(j, j) = den;
      H(j + 1, j) = 0.0;
      g(j + 1) = -sn[j] * g(j);
      g(j) = cs[j] * g(j);
      ++j;
      const double res = std::abs(g(j)) / bnorm;
      estimate = res;
      char buf[96];
      std::snprintf(buf, sizeof buf, "  GMRES iteration %3d: relative residual %.3e", total + 1, res);
      history.emplace_back(buf);
      if (res <= 0.1 * opt.krylov_tolerance || hn == 0.0) {
        ++total;
        break;
      }
      V.push_back(w / hn);
    }
    const Eigen::VectorXd y = H.topLeftCorner(j, j).triangularView<Eigen::Upper>().solve(g.head(j));
    for (int i = 0; i < j; ++i) x += y(i) * V[i];
    last_iterations = total;
  }
  const Eigen::VectorXd rt = b - A(x);
  const double res = std::sqrt(R.dot(rt, rt)) / bnorm;
  last_residual = res;
  if (res <= opt.krylov_floor) return x;
  std::ostringstream msg;
  msg << "GMRES on the " << (adjoint ? "adjoint" : "tangent") << " SCF response did not converge: relative residual "
      << res << " after " << total << " iterations (tolerance " << opt.krylov_tolerance << ")";
  throw NumericalError(msg.str(), history);
}

Eigen::VectorXd Response::solve_tangent(const Eigen::VectorXd& b) const { return impl_->gmres(b, false, *this); }
Eigen::VectorXd Response::solve_adjoint(const Eigen::VectorXd& b) const { return impl_->gmres(b, true, *this); }
int Response::last_iterations() const { return impl_->last_iterations; }
double Response::last_residual() const { return impl_->last_residual; }

}  // namespace stillpoint
