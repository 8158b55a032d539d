#include "stillpoint/numerics/eigensolver.hpp"

#include <Spectra/SymEigsShiftSolver.h>

#include <Eigen/SparseCholesky>
#include <algorithm>
#include <cmath>
#include <numeric>
#include <random>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/band_lu.hpp"

extern "C" {
// LAPACK banded Cholesky (gfortran ABI: hidden length of the character argument last).
void dpbtrf_(const char* uplo, const int* n, const int* kd, double* ab, const int* ldab, int* info, std::size_t);
}

namespace stillpoint {

namespace {
using SpMat = Eigen::SparseMatrix<double>;
using Ldlt = Eigen::SimplicialLDLT<SpMat, Eigen::Lower, Eigen::NaturalOrdering<int>>;

// Banded Cholesky of H - sigma in LAPACK upper band storage. Below the spectrum the matrix is
// positive definite, so success of the factorization is itself the proof that sigma is a
// lower bound, and the triangular solves are dense-band BLAS, several times faster than a
// general sparse solve.
struct BandCholesky {
  int n = 0, kd = 0;
  Eigen::MatrixXd ab;  // (kd + 1) x n
  bool factor(const SpMat& H, double sigma) {
    ab.setZero(kd + 1, n);
    for (int j = 0; j < H.outerSize(); ++j)
      for (SpMat::InnerIterator it(H, j); it; ++it) {
        const int i = static_cast<int>(it.row());
        if (i > j || j - i > kd) continue;
        ab(kd + i - j, j) = it.value() - (i == j ? sigma : 0.0);
      }
    int info = 0, ldab = kd + 1;
    dpbtrf_("U", &n, &kd, ab.data(), &ldab, &info, 1);
    return info == 0;
  }
  void solve(double* b) const { band_cholesky_solve(ab.data(), n, kd, b); }
};

struct ShiftInvertOp {
  using Scalar = double;
  const BandCholesky* chol = nullptr;
  Eigen::Index n = 0;
  Eigen::Index rows() const { return n; }
  Eigen::Index cols() const { return n; }
  void set_shift(double) {}
  void perform_op(const double* x, double* y) const {
    std::copy(x, x + n, y);
    chol->solve(y);
  }
};

int negatives(const Ldlt& f) {
  return static_cast<int>((f.vectorD().array() < 0.0).count());
}
}  // namespace

int count_negative_eigenvalues(const Eigen::SparseMatrix<double>& A) {
  Ldlt f(A);
  if (f.info() != Eigen::Success) throw NumericalError("LDL^T factorization failed while counting eigenvalues");
  return negatives(f);
}

struct LowestEigensolver::Impl {
  SpMat T;  // both triangles stored
  EigensolverOptions options;
  Eigen::MatrixXd dense_T;
  int bandwidth = 0;
  double norm_T = 0.0;  // max absolute row sum, sets the rounding floor of residuals
  mutable BandCholesky chol;
  mutable Ldlt ldlt;
  mutable bool analyzed = false;
  // Band storage reused by every solve: fresh buffers of this size cost page faults each time
  // (a few percent of a hydrogen SCF).
  mutable std::vector<double> band;
  mutable BandLuFactor unshifted, lu;
};

LowestEigensolver::LowestEigensolver(Eigen::SparseMatrix<double> T, EigensolverOptions options)
    : impl_(std::make_unique<Impl>()) {
  impl_->T = std::move(T);
  impl_->T.makeCompressed();
  impl_->options = options;
  if (impl_->T.rows() <= options.dense_below) impl_->dense_T = Eigen::MatrixXd(impl_->T);
  for (int j = 0; j < impl_->T.outerSize(); ++j)
    for (SpMat::InnerIterator it(impl_->T, j); it; ++it)
      impl_->bandwidth = std::max(impl_->bandwidth, static_cast<int>(std::abs(it.row() - j)));
  Eigen::VectorXd rowsum = Eigen::VectorXd::Zero(impl_->T.rows());
  for (int j = 0; j < impl_->T.outerSize(); ++j)
    for (SpMat::InnerIterator it(impl_->T, j); it; ++it) rowsum(it.row()) += std::abs(it.value());
  impl_->norm_T = rowsum.maxCoeff();
  impl_->chol.n = static_cast<int>(impl_->T.rows());
  impl_->chol.kd = impl_->bandwidth;
}

LowestEigensolver::~LowestEigensolver() = default;
LowestEigensolver::LowestEigensolver(LowestEigensolver&&) noexcept = default;
LowestEigensolver& LowestEigensolver::operator=(LowestEigensolver&&) noexcept = default;

int LowestEigensolver::size() const { return static_cast<int>(impl_->T.rows()); }

namespace {

// Banded LU with partial pivoting of H - mu: stable for the nearly singular shifts that make
// inverse iteration converge in one or two steps (numerics/band_lu.hpp: LAPACK's algorithm
// without its per-column BLAS calls).
struct BandLu {
  int n = 0, kd = 0;
  BandLuFactor& f;  // storage kept by the solver between solves
  // H in the factor's storage, filled once per solve: each factorization then starts from a
  // copy instead of walking the sparse matrix (the walk cost about as much as the elimination).
  const BandLuFactor* unshifted = nullptr;
  void factor(const SpMat& H, double mu) {
    if (unshifted) {
      f.n = unshifted->n;
      f.kl = unshifted->kl;
      f.ku = unshifted->ku;
      f.ab = unshifted->ab;
      f.ipiv.resize(f.n);
      for (int j = 0; j < n; ++j) f.at(j, j) -= mu;
    } else {
      f.reset(n, kd, kd);
      for (int j = 0; j < H.outerSize(); ++j)
        for (SpMat::InnerIterator it(H, j); it; ++it) {
          const int i = static_cast<int>(it.row());
          if (std::abs(i - j) > kd) continue;
          f.at(i, j) = it.value() - (i == j ? mu : 0.0);
        }
    }
    f.factor();  // an exactly singular pivot still gives a huge, eigenvector-rich solve
  }
  void solve(Eigen::VectorXd& b) const { f.solve(b.data()); }
};

}  // namespace

Eigenpairs LowestEigensolver::solve(const Eigen::VectorXd& diagonal, int count, EigenWarmStart& warm) const {
  const Impl& I = *impl_;
  const Eigen::Index n = I.T.rows();
  if (count < 1 || count >= n)
    throw InputError("requested " + std::to_string(count) + " eigenstates from a grid with only " +
                     std::to_string(n) + " unknowns: use a larger grid");
  if (n <= I.options.dense_below) {
    Eigen::MatrixXd H = I.dense_T;
    H.diagonal() += diagonal;
    Eigenpairs ep = dense_lowest_eigenpairs(H, count);
    warm.previous = ep;
    return ep;
  }
  SpMat H = I.T;
  for (Eigen::Index k = 0; k < n; ++k) H.coeffRef(k, k) += diagonal(k);
  // T is positive semi-definite (kinetic plus centrifugal), so min(diagonal) bounds the spectrum.
  const double proven = diagonal.minCoeff() - 1e-8 * (1.0 + std::abs(diagonal.minCoeff()));

  auto count_below = [&](double x) {
    SpMat shifted = H;
    for (Eigen::Index k = 0; k < n; ++k) shifted.coeffRef(k, k) -= x;
    if (!I.analyzed) {
      I.ldlt.analyzePattern(shifted);
      I.analyzed = true;
    }
    I.ldlt.factorize(shifted);
    if (I.ldlt.info() != Eigen::Success) return -1;
    return negatives(I.ldlt);
  };

  const double norm_H = I.norm_T + diagonal.cwiseAbs().maxCoeff();
  // Refines (mu, x) by shifted inverse iteration against the states already in `out`; true
  // when the residual reaches the rounding floor within four steps.
  auto refine = [&](BandLu& lu, double mu, Eigen::VectorXd& x, const Eigenpairs& out, int i, double& rho,
                    int extra = 0) {
    // Residual of the start, so the first step's reduction can be judged.
    double prev_res = std::numeric_limits<double>::infinity();
    if (const double nx = x.norm(); nx > 0.0) {
      const Eigen::VectorXd Hx = H * x;
      prev_res = (Hx - (x.dot(Hx) / (nx * nx)) * x).norm() / nx;
    }
    bool factored = false, polished = false;
    int steps_left = 4 + extra;
    while (steps_left-- > 0) {
      const bool reused = factored;
      if (!factored) lu.factor(H, mu);
      factored = true;
      lu.solve(x);
      for (int j = 0; j < i; ++j) x -= out.vectors.col(j).dot(x) * out.vectors.col(j);
      x.normalize();
      const Eigen::VectorXd Hx = H * x;
      rho = x.dot(Hx);
      const double res = (Hx - rho * x).norm();
      if (!std::isfinite(res)) return false;
      if (res <= 1e-11 * (1.0 + std::abs(rho)) + 1e-14 * norm_H) {
        // A fixed shift converges linearly and stops just under the test, where a Rayleigh step
        // lands far below it: one more solve with the same factor gives the last digits that
        // response solves (GMRES to 1e-12) rely on.
        if (reused && !polished && extra == 0) {
          polished = true;
          ++steps_left;
          continue;
        }
        if (extra-- <= 0) return true;
      }
      // A step that cut the residual a thousandfold had a shift close to the eigenvalue
      // compared with the gap: the next step with the same factorization gains as much again,
      // for a triangular solve instead of a new LU (the warm path's usual second step). A
      // slower step gets the Rayleigh-quotient shift, nudged off the exact value so the LU
      // stays regular.
      if (!(res < 1e-3 * prev_res)) {
        mu = rho + 1e-13 * (1.0 + std::abs(rho));
        factored = false;
      }
      prev_res = res;
    }
    return false;
  };
  // Lower band of H for the inertia counts (band L D L^T, O(n kd^2) each), built once per solve.
  const int kd = I.bandwidth, nn = static_cast<int>(n);
  std::vector<double>& band = I.band;
  band.assign(static_cast<std::size_t>(kd + 1) * nn, 0.0);
  for (int j = 0; j < H.outerSize(); ++j)
    for (SpMat::InnerIterator it(H, j); it; ++it) {
      const int i = static_cast<int>(it.row());
      if (i >= j && i - j <= kd) band[(i - j) + static_cast<std::size_t>(j) * (kd + 1)] = it.value();
    }
  auto below = [&](double x) { return band_count_below(band, nn, kd, x); };
  BandLuFactor& unshifted = I.unshifted;
  unshifted.reset(nn, kd, kd);
  for (int j = 0; j < H.outerSize(); ++j)
    for (SpMat::InnerIterator it(H, j); it; ++it)
      if (std::abs(static_cast<int>(it.row()) - j) <= kd) unshifted.at(static_cast<int>(it.row()), j) = it.value();
  // The set is the lowest `count` when H - low is positive definite (no eigenvalue below low)
  // and exactly `count` eigenvalues lie below just above the highest. Two band counts: the
  // sparse LDL^T and the Cholesky they replace cost several times more for the same proof.
  auto proven_lowest = [&](const Eigenpairs& out) {
    for (int i = 1; i < count; ++i)
      if (out.values(i) < out.values(i - 1) - 1e-12 * (1.0 + std::abs(out.values(i)))) return false;
    const double span = 1e-9 * (1.0 + std::abs(out.values(count - 1)));
    const double low = out.values(0) - std::max(span, 1e-6 * (1.0 + std::abs(out.values(0))));
    return below(low) == 0 && below(out.values(count - 1) + span) == count;
  };
  // Pairs a failed warm refinement leaves behind: each (value, residual norm) has an
  // eigenvalue within the residual of the value (symmetric H), which two inertia counts place.
  struct Hint {
    double value, residual;
    Eigen::VectorXd vector;
  };
  auto cold_by_bisection = [&](double lo, Eigenpairs& out, const std::vector<Hint>& hints) {
    const int cnt = count;
    // The previous solve's bound, when inertia confirms it, saves the bisection the distance
    // from the proven bound (min diagonal, thousands of hartree below near a nucleus).
    if (std::isfinite(warm.lower_bound) && warm.lower_bound > lo && below(warm.lower_bound) == 0) lo = warm.lower_bound;
    // Brackets a[j] < lambda_j <= b[j] with the counts at their ends; b unknown (infinite) until
    // a count at or above cnt is seen.
    const double inf = std::numeric_limits<double>::infinity();
    std::vector<double> a(cnt, lo), b(cnt, inf);
    std::vector<int> ca(cnt, 0), cb(cnt, cnt + 1);
    auto probe = [&](double x) {
      const int c = below(x);
      for (int j = 0; j < cnt; ++j) {
        if (c > j) {
          if (x < b[j]) b[j] = x, cb[j] = c;
        } else if (x > a[j]) {
          a[j] = x, ca[j] = c;
        }
      }
    };
    for (const Hint& h : hints) {
      const double slack = h.residual + 1e-9 * (1.0 + std::abs(h.value));
      if (h.value - slack > a[0]) probe(h.value - slack);
      if (h.value + slack > a[0] && h.value + slack < b[cnt - 1]) probe(h.value + slack);
    }
    double step = std::max(1.0, 1e-3 * std::abs(lo));
    for (int guard = 0; !std::isfinite(b[cnt - 1]); ++guard) {
      if (guard > 80) return false;
      probe(a[cnt - 1] + step);
      step *= 2.0;
    }
    // Bisect until each bracket holds exactly its own eigenvalue and is narrow (1e-4 relative):
    // inverse iteration from its middle then gains four digits or more per step, and a result
    // inside the bracket can only be that eigenvalue.
    for (int k = 0; k < cnt; ++k) {
      for (int steps = 0;
           ca[k] != k || cb[k] != k + 1 || b[k] - a[k] > 1e-4 * (1.0 + std::max(std::abs(a[k]), std::abs(b[k])));
           ++steps) {
        if (steps > 200) return false;
        probe(0.5 * (a[k] + b[k]));
      }
    }
    BandLu lu{0, 0, I.lu};
    lu.n = nn;
    lu.kd = kd;
    lu.unshifted = &unshifted;
    out.values.resize(cnt);
    out.vectors.resize(n, cnt);
    std::mt19937 rng(12345);  // no symmetry, so no state is missed by parity; fixed for reproducibility
    std::uniform_real_distribution<double> u(0.5, 1.5);
    for (int k = 0; k < cnt; ++k) {
      Eigen::VectorXd x(n);
      for (Eigen::Index q = 0; q < n; ++q) x(q) = u(rng);
      // A hint inside the bracket is that state's vector, nearly converged: a better start than noise.
      for (const Hint& h : hints)
        if (h.value > a[k] && h.value <= b[k]) x = h.vector;
      double rho = 0.0;
      const double mu = 0.5 * (a[k] + b[k]) + 1e-13 * (1.0 + std::abs(a[k]));
      // One step past the residual test: a vector from a fresh start carries no history, and
      // finite differences of densities (inversion Hessians, gradient checks) see its last digits.
      if (!refine(lu, mu, x, out, k, rho, 1)) return false;
      // Inverse iteration may slide to a neighbour in a tight cluster: the value must be the
      // k-th eigenvalue, inside its own bracket.
      const double slack = 1e-12 * (1.0 + std::abs(rho));
      if (rho < a[k] - slack || rho > b[k] + slack) return false;
      out.values(k) = rho;
      out.vectors.col(k) = x;
    }
    return proven_lowest(out);
  };

  // Warm path: refine the previous eigenpairs by shifted inverse iteration, then prove by
  // inertia that they are the lowest `count`.
  std::vector<Hint> hints;
  if (warm.previous.vectors.cols() == count && warm.previous.vectors.rows() == n) {
    BandLu lu{0, 0, I.lu};
    lu.n = static_cast<int>(n);
    lu.kd = I.bandwidth;
    lu.unshifted = &unshifted;
    Eigenpairs out;
    out.values.resize(count);
    out.vectors.resize(n, count);
    bool ok = true;
    for (int i = 0; i < count && ok; ++i) {
      Eigen::VectorXd x = warm.previous.vectors.col(i);
      double rho = x.dot(H * x);
      ok = refine(lu, warm.previous.values(i), x, out, i, rho);
      out.values(i) = rho;
      out.vectors.col(i) = x;
      const double res = (H * x - rho * x).norm();
      if (std::isfinite(res) && std::isfinite(rho)) hints.push_back({rho, res, x});
    }
    if (ok && proven_lowest(out)) {
      warm.lower_bound = out.values(0) - 0.1 * std::abs(out.values(0)) - 0.05;
      warm.previous = out;
      return out;
    }
    // A state crossed or was lost (early SCF iterations move levels by many hartree, and new
    // ones come in from below): the bisection below starts from what the refinement did find.
  }

  // Cold path: bisection on Sylvester inertia (band L D L^T, O(n kd^2) per count) brackets
  // each of the lowest `count` eigenvalues to 1e-9 relative, shifted inverse iteration at the
  // bracket refines it and its vector, and the warm path's inertia proof certifies the set.
  // Shift-invert Lanczos below stays the fallback. (Lanczos from one shift below a spectrum that
  // spans thousands of hartree needed thousands of restarts for xenon's 5 s levels.)
  if (Eigenpairs ep; cold_by_bisection(proven, ep, hints)) {
    warm.lower_bound = ep.values(0) - 0.1 * std::abs(ep.values(0)) - 0.05;
    warm.previous = ep;
    return ep;
  }
  double sigma = std::isfinite(warm.lower_bound) ? std::max(warm.lower_bound, proven) : proven;
  // Walk down from the hint until H - sigma is positive definite.
  for (int tries = 0;; ++tries) {
    if (I.chol.factor(H, sigma)) break;
    if (sigma <= proven || tries > 60) throw NumericalError("banded Cholesky failed below the proven spectrum bound");
    const double step = std::max(1.0, std::abs(sigma)) * std::pow(2.0, tries - 3);
    sigma = std::max(proven, sigma - step);
  }
  ShiftInvertOp op;
  op.chol = &I.chol;
  op.n = n;
  const Eigen::Index ncv = std::min<Eigen::Index>(n, std::max<Eigen::Index>(2 * count + 1, count + 20));
  Spectra::SymEigsShiftSolver<ShiftInvertOp> eigs(op, count, ncv, sigma);
  eigs.init();
  eigs.compute(Spectra::SortRule::LargestMagn, I.options.max_restarts, I.options.tolerance);
  if (eigs.info() != Spectra::CompInfo::Successful && n <= 4000) {
    // One shift below a spectrum spanning many hartree (heavy atoms) can leave the highest
    // requested states nearly indistinguishable; a dense solve is still affordable here.
    Eigen::MatrixXd Hd = Eigen::MatrixXd(H);
    Eigenpairs ep = dense_lowest_eigenpairs(Hd, count);
    warm.lower_bound = ep.values(0) - 0.1 * std::abs(ep.values(0)) - 0.05;
    warm.previous = ep;
    return ep;
  }
  if (eigs.info() != Spectra::CompInfo::Successful) {
    std::ostringstream msg;
    msg << "shift-invert Lanczos did not converge for the lowest " << count << " states (shift " << sigma
        << " hartree, " << eigs.num_iterations() << " restarts)";
    throw NumericalError(msg.str());
  }
  Eigen::VectorXd vals = eigs.eigenvalues();
  Eigen::MatrixXd vecs = eigs.eigenvectors();
  std::vector<int> order(count);
  std::iota(order.begin(), order.end(), 0);
  std::sort(order.begin(), order.end(), [&](int a, int b) { return vals(a) < vals(b); });
  Eigenpairs out;
  out.values.resize(count);
  out.vectors.resize(n, count);
  for (int j = 0; j < count; ++j) {
    Eigen::VectorXd v = vecs.col(order[j]);
    v.normalize();
    out.vectors.col(j) = v;
    out.values(j) = v.dot(H * v);  // Rayleigh quotient
  }
  // Inertia check just above the highest state returned: more than `count` eigenvalues below
  // it means Lanczos skipped a state.
  const double top = out.values(count - 1);
  const int n_below = count_below(top + 1e-9 * (1.0 + std::abs(top)));
  if (n_below > count) {
    std::ostringstream msg;
    msg << "eigensolver returned " << count << " states but " << n_below << " eigenvalues lie below " << top
        << " hartree (a state was missed)";
    throw NumericalError(msg.str());
  }
  warm.lower_bound = out.values(0) - 0.1 * std::abs(out.values(0)) - 0.05;
  warm.previous = out;
  return out;
}

}  // namespace stillpoint
