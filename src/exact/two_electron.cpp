// Exact one- and two-electron line systems: the product-grid Hamiltonian, its Kronecker
// preconditioner, a block Davidson solver, and the exact Kohn–Sham potential of the result.
#include "stillpoint/exact/two_electron.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <numeric>
#include <sstream>
#include <tuple>

#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/numerics/kinetic.hpp"
#include "stillpoint/ks/problem.hpp"

extern "C" {
// BLAS (OpenBLAS; gfortran ABI with hidden lengths of the character arguments).
void dgemm_(const char* transa, const char* transb, const int* m, const int* n, const int* k, const double* alpha,
            const double* a, const int* lda, const double* b, const int* ldb, const double* beta, double* c,
            const int* ldc, std::size_t, std::size_t);
}

namespace stillpoint {

namespace {

using Clock = std::chrono::steady_clock;

double seconds_since(Clock::time_point t0) { return std::chrono::duration<double>(Clock::now() - t0).count(); }

/// C = op(A) op(B) for square N x N column-major matrices.
void gemm(char ta, char tb, const double* A, const double* B, double* C, int n) {
  const double one = 1.0, zero = 0.0;
  dgemm_(&ta, &tb, &n, &n, &n, &one, A, &n, B, &n, &zero, C, &n, 1, 1);
}

double sign_of(ExchangeSymmetry s) { return s == ExchangeSymmetry::Symmetric ? 1.0 : -1.0; }

/// Makes M exactly (anti)symmetric: M <- (M + sign M^T) / 2.
void symmetrize(double* M, int n, double sign) {
  for (int j = 0; j < n; ++j) {
    for (int i = j + 1; i < n; ++i) {
      const double a = 0.5 * (M[i + static_cast<std::size_t>(j) * n] + sign * M[j + static_cast<std::size_t>(i) * n]);
      M[i + static_cast<std::size_t>(j) * n] = a;
      M[j + static_cast<std::size_t>(i) * n] = sign * a;
    }
    if (sign < 0) M[j + static_cast<std::size_t>(j) * n] = 0.0;
  }
}

}  // namespace

const char* spin_state_name(ExchangeSymmetry s) { return s == ExchangeSymmetry::Symmetric ? "singlet" : "triplet"; }

TwoElectronHamiltonian::TwoElectronHamiltonian(const Mesh& mesh, const Eigen::VectorXd& v_ext, double softening,
                                               bool interacting) {
  if (mesh.geometry() != Geometry::Line) throw InputError("exact two-electron solutions are available for line systems only");
  if (v_ext.size() != mesh.num_nodes()) throw std::logic_error("TwoElectronHamiltonian: v_ext has the wrong size");
  if (interacting && !(softening > 0)) throw InputError("electron_softening must be positive (bohr)");
  n_ = mesh.num_unknowns();
  const int first = mesh.first_unknown();
  T_ = scaled_kinetic(mesh, 0);
  T_.makeCompressed();
  Eigen::MatrixXd h = Eigen::MatrixXd(T_);
  const Eigen::VectorXd v = v_ext.segment(first, n_);
  h.diagonal() += v;
  const Eigenpairs all = dense_lowest_eigenpairs(h, n_);
  lambda_ = all.values;
  Q_ = all.vectors;
  const Eigen::VectorXd x = mesh.x().segment(first, n_);
  W_.setZero(n_, n_);
  if (interacting)
    for (int j = 0; j < n_; ++j)
      for (int i = 0; i < n_; ++i) {
        const double d = x(i) - x(j);
        W_(i, j) = 1.0 / std::sqrt(d * d + softening * softening);
      }
  V_ = W_;
  V_.colwise() += v;
  V_.rowwise() += v.transpose();
  // ||H|| <= 2 ||h|| + max w; ||h|| = max |lambda|.
  norm_ = 2.0 * std::max(std::abs(lambda_(0)), std::abs(lambda_(n_ - 1))) + (interacting ? 1.0 / softening : 0.0);
}

void TwoElectronHamiltonian::apply(const Eigen::MatrixXd& C, Eigen::MatrixXd& out, ExchangeSymmetry s) const {
  const double sign = sign_of(s);
  const int n = n_;
  Eigen::MatrixXd M(n, n);
  M.noalias() = T_ * C;  // (T C); for C = sign C^T, C T = sign (T C)^T
  out.resize(n, n);
  for (int j = 0; j < n; ++j)
    for (int i = 0; i < n; ++i) out(i, j) = M(i, j) + sign * M(j, i) + V_(i, j) * C(i, j);
  symmetrize(out.data(), n, sign);
}

void TwoElectronHamiltonian::precondition(const Eigen::MatrixXd& R, double shift, Eigen::MatrixXd& out,
                                          ExchangeSymmetry s) const {
  const int n = n_;
  Eigen::MatrixXd A(n, n), B(n, n);
  gemm('N', 'N', R.data(), Q_.data(), A.data(), n);  // A = R Q
  gemm('T', 'N', Q_.data(), A.data(), B.data(), n);  // B = Q^T R Q: R in the eigenbasis of h
  for (int j = 0; j < n; ++j)
    for (int i = 0; i < n; ++i) {
      const double d = lambda_(i) + lambda_(j) - shift;
      B(i, j) = (s == ExchangeSymmetry::Antisymmetric && i == j) ? 0.0 : B(i, j) / d;
    }
  gemm('N', 'T', B.data(), Q_.data(), A.data(), n);  // A = B Q^T
  out.resize(n, n);
  gemm('N', 'N', Q_.data(), A.data(), out.data(), n);  // out = Q B Q^T
  symmetrize(out.data(), n, sign_of(s));
}

ProductEigenResult TwoElectronHamiltonian::lowest(ExchangeSymmetry s, const ProductEigenOptions& o) const {
  const auto t0 = Clock::now();
  const int n = n_;
  const double sign = sign_of(s);
  const bool sym = s == ExchangeSymmetry::Symmetric;
  const long sector = sym ? static_cast<long>(n) * (n + 1) / 2 : static_cast<long>(n) * (n - 1) / 2;
  if (o.states < 1) throw InputError("states must be >= 1");
  if (o.states > std::min<long>(sector - 1, 64))
    throw InputError("states = " + std::to_string(o.states) + " is too many for this grid (" + std::to_string(sector) +
                     "-dimensional " + spin_state_name(s) + " space; at most 64)");
  if (!(o.shift_margin > 0)) throw std::logic_error("shift_margin must be positive");
  const int m = o.states;
  const int block = m;  // measured: extra block vectors cost more products than they save
  const int kmax = std::max(16, 4 * block + 8);
  const std::size_t dim = static_cast<std::size_t>(n) * n;

  ProductEigenResult res;
  res.tolerance_used = std::max(o.residual_tolerance, 100.0 * std::numeric_limits<double>::epsilon() * norm_);

  // Pair energies lambda_a + lambda_b of the sector, lowest first: the initial guesses are the
  // corresponding (anti)symmetrized orbital products.
  const int K = std::min(n, m + 8);
  std::vector<std::tuple<double, int, int>> pairs;
  for (int a = 0; a < K; ++a)
    for (int b = sym ? a : a + 1; b < K; ++b) pairs.emplace_back(lambda_(a) + lambda_(b), a, b);
  std::sort(pairs.begin(), pairs.end());
  const double lowest_pair = std::get<0>(pairs.front());
  const double shift = lowest_pair - o.shift_margin;

  Eigen::MatrixXd V(dim, kmax), AV(dim, kmax), G = Eigen::MatrixXd::Zero(kmax, kmax);
  int k = 0;
  Eigen::MatrixXd Cm(n, n), Hm(n, n);
  // Orthonormalizes column k of V against columns 0..k-1 (twice), appends it and its image.
  auto append = [&](double drop_ratio) -> bool {
    auto t = V.col(k);
    const double before = t.norm();
    if (!(before > 0) || !std::isfinite(before)) return false;
    for (int pass = 0; pass < 2 && k > 0; ++pass) {
      const Eigen::VectorXd c = V.leftCols(k).transpose() * t;
      t.noalias() -= V.leftCols(k) * c;
    }
    const double after = t.norm();
    if (!(after > drop_ratio * before)) return false;
    t /= after;
    Eigen::Map<Eigen::MatrixXd> tm(V.col(k).data(), n, n);
    symmetrize(tm.data(), n, sign);  // keeps the sector exactly; t stays normalized to rounding
    Cm = tm;
    apply(Cm, Hm, s);
    ++res.hamiltonian_products;
    AV.col(k) = Eigen::Map<const Eigen::VectorXd>(Hm.data(), static_cast<Eigen::Index>(dim));
    const Eigen::VectorXd g = V.leftCols(k + 1).transpose() * AV.col(k);
    G.block(0, k, k + 1, 1) = g;
    G.block(k, 0, 1, k + 1) = g.transpose();
    ++k;
    return true;
  };

  const int initial = std::min<int>(static_cast<int>(pairs.size()), block + 2);
  for (int g = 0; g < initial; ++g) {
    const auto [e, a, b] = pairs[g];
    Eigen::Map<Eigen::MatrixXd> t(V.col(k).data(), n, n);
    t.noalias() = Q_.col(a) * Q_.col(b).transpose();
    t += sign * Q_.col(b) * Q_.col(a).transpose();
    append(1e-8);
  }

  Eigen::VectorXd theta;
  Eigen::MatrixXd Y, X(dim, block), AX(dim, block);
  Eigen::VectorXd rnorm(block);
  bool converged = false;
  for (int it = 0; it < o.max_iterations; ++it) {
    res.iterations = it + 1;
    Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(G.topLeftCorner(k, k));
    if (es.info() != Eigen::Success) throw NumericalError("Davidson: the projected eigenproblem failed");
    theta = es.eigenvalues();
    Y = es.eigenvectors();
    const int b = std::min(block, k);
    X.leftCols(b).noalias() = V.leftCols(k) * Y.leftCols(b);
    AX.leftCols(b).noalias() = AV.leftCols(k) * Y.leftCols(b);
    Eigen::MatrixXd R = AX.leftCols(b) - X.leftCols(b) * theta.head(b).asDiagonal();
    for (int i = 0; i < b; ++i) rnorm(i) = R.col(i).norm();
    converged = b >= m && (rnorm.head(m).array() <= res.tolerance_used).all();
    if (converged) break;
    // Restart: keep the Ritz vectors of the lowest 2 * block values.
    if (k + b > kmax) {
      const int keep = std::min(k, 2 * block);
      Eigen::MatrixXd Vk = V.leftCols(k) * Y.leftCols(keep);
      Eigen::MatrixXd AVk = AV.leftCols(k) * Y.leftCols(keep);
      V.leftCols(keep) = Vk;
      AV.leftCols(keep) = AVk;
      G.setZero();
      G.topLeftCorner(keep, keep) = theta.head(keep).asDiagonal();
      k = keep;
    }
    int added = 0;
    for (int i = 0; i < b; ++i) {
      if (rnorm(i) <= res.tolerance_used && i < m) continue;
      Eigen::Map<const Eigen::MatrixXd> r(R.col(i).data(), n, n);
      Eigen::Map<Eigen::MatrixXd> t(V.col(k).data(), n, n);
      Cm = r;
      precondition(Cm, shift, Hm, s);
      ++res.preconditioner_products;
      t = Hm;
      if (append(1e-10)) ++added;
    }
    if (added == 0) {
      // Nothing new could be added: the subspace is exhausted at rounding level.
      break;
    }
  }
  if (!converged) {
    std::ostringstream msg;
    msg << "the " << spin_state_name(s) << " eigensolver did not converge in " << res.iterations
        << " iterations: residuals";
    for (int i = 0; i < std::min<int>(m, static_cast<int>(rnorm.size())); ++i) msg << " " << rnorm(i);
    msg << " hartree, tolerance " << res.tolerance_used << " hartree; raise [exact] max_iterations or residual_tolerance";
    throw NumericalError(msg.str());
  }
  res.energies.resize(m);
  res.residuals.resize(m);
  for (int i = 0; i < m; ++i) {
    Eigen::MatrixXd C = Eigen::Map<const Eigen::MatrixXd>(X.col(i).data(), n, n);
    symmetrize(C.data(), n, sign);
    C /= C.norm();
    // Fix the overall sign so the largest coefficient is positive (reproducible output).
    Eigen::Index mi, mj;
    C.cwiseAbs().maxCoeff(&mi, &mj);
    if (C(mi, mj) < 0) C = -C;
    apply(C, Hm, s);
    ++res.hamiltonian_products;
    const double e = (C.array() * Hm.array()).sum();
    res.energies(i) = e;
    res.residuals(i) = (Hm - e * C).norm();
    res.coefficients.push_back(std::move(C));
  }
  res.seconds = seconds_since(t0);
  return res;
}

Eigen::VectorXd two_electron_density(const Mesh& mesh, const Eigen::MatrixXd& C) {
  const int first = mesh.first_unknown();
  Eigen::VectorXd n = Eigen::VectorXd::Zero(mesh.num_nodes());
  for (int i = 0; i < C.rows(); ++i) n(first + i) = 2.0 * C.row(i).squaredNorm() / mesh.w()(first + i);
  return n;
}

ExactKsPotential exact_ks_potential(const Mesh& mesh, const Eigen::SparseMatrix<double>& kinetic,
                                    const Eigen::VectorXd& density, double homo, int electrons, double trust_density) {
  if (electrons != 1 && electrons != 2) throw std::logic_error("exact_ks_potential: one or two electrons");
  const int first = mesh.first_unknown(), nu = mesh.num_unknowns(), nn = mesh.num_nodes();
  if (density.size() != nn || kinetic.rows() != nu) throw std::logic_error("exact_ks_potential: size mismatch");
  ExactKsPotential out;
  out.homo = homo;
  out.trust_density = trust_density;
  out.orbital.resize(nu);
  for (int i = 0; i < nu; ++i) out.orbital(i) = std::sqrt(std::max(0.0, mesh.w()(first + i) * density(first + i) / electrons));
  const Eigen::VectorXd Tc = kinetic * out.orbital;
  out.v_s = Eigen::VectorXd::Zero(nn);
  out.trusted.assign(nn, 0);
  for (int i = 0; i < nu; ++i) {
    const int k = first + i;
    if (density(k) >= trust_density && out.orbital(i) > 0) {
      out.v_s(k) = homo - Tc(i) / out.orbital(i);
      out.trusted[k] = 1;
      ++out.trusted_nodes;
    }
  }
  if (out.trusted_nodes == 0)
    throw NumericalError("no grid node has a density above the trust threshold " + std::to_string(trust_density) +
                         " electrons/bohr; the exact Kohn–Sham potential is undetermined");
  // Untrusted nodes: value of the nearest trusted node (by position).
  const Eigen::VectorXd& x = mesh.x();
  std::vector<int> left(nn, -1), right(nn, -1);
  for (int k = 0, last = -1; k < nn; ++k) {
    if (out.trusted[k]) last = k;
    left[k] = last;
  }
  for (int k = nn - 1, last = -1; k >= 0; --k) {
    if (out.trusted[k]) last = k;
    right[k] = last;
  }
  for (int k = 0; k < nn; ++k) {
    if (out.trusted[k]) continue;
    int src = left[k];
    if (src < 0 || (right[k] >= 0 && x(right[k]) - x(k) < x(k) - x(src))) src = right[k];
    out.v_s(k) = out.v_s(src);
  }
  return out;
}

namespace {

int checked_electrons(const SystemSpec& spec) {
  if (spec.geometry != Geometry::Line)
    throw InputError("system '" + spec.name + "': exact solutions are for line systems (kind = \"line\") only");
  const double ne = spec.electron_count();
  const double r = std::round(ne);
  if (std::abs(ne - r) > 1e-9 || (r != 1.0 && r != 2.0)) {
    std::ostringstream m;
    m << "system '" << spec.name << "' has " << ne << " electrons; exact solutions need exactly 1 or 2 "
      << "(electrons = sum of nuclear charges - charge)";
    throw InputError(m.str());
  }
  return static_cast<int>(r);
}

/// Energies of all levels of one system (used for the main grid and the comparison grid).
struct LevelSolve {
  std::vector<ExactLevel> levels;
  std::vector<Eigen::MatrixXd> coefficients;  // two electrons: per level
  Eigen::VectorXd one_electron;              // eigenvalues of h (electronic)
  int iterations = 0, hproducts = 0, pproducts = 0;
  double seconds = 0.0, tolerance = 0.0;
};

LevelSolve solve_levels(const KsProblem& P, const TwoElectronHamiltonian& H, int electrons, const ExactOptions& o,
                        bool keep_densities) {
  LevelSolve out;
  const Mesh& mesh = P.mesh();
  const double e_nn = P.nuclear_repulsion();
  out.one_electron = H.one_electron_energies();
  const int first = mesh.first_unknown();
  if (electrons == 1) {
    const int count = std::min(o.states, H.size());
    Eigen::MatrixXd h = Eigen::MatrixXd(H.kinetic());
    h.diagonal() += P.external_potential().segment(first, H.size());
    for (int i = 0; i < count; ++i) {
      ExactLevel L;
      L.spin = "doublet";
      L.index = i;
      L.energy = H.one_electron_energies()(i) + e_nn;
      const Eigen::VectorXd q = H.one_electron_vectors().col(i);
      L.residual = (h * q - H.one_electron_energies()(i) * q).norm();
      if (keep_densities) {
        L.density = Eigen::VectorXd::Zero(mesh.num_nodes());
        for (int j = 0; j < H.size(); ++j) L.density(first + j) = q(j) * q(j) / mesh.w()(first + j);
      }
      out.levels.push_back(std::move(L));
    }
    return out;
  }
  ProductEigenOptions po;
  po.states = o.states;
  po.residual_tolerance = o.residual_tolerance;
  po.max_iterations = o.max_iterations;
  std::vector<ExchangeSymmetry> sectors{ExchangeSymmetry::Symmetric};
  if (o.triplet) sectors.push_back(ExchangeSymmetry::Antisymmetric);
  for (ExchangeSymmetry s : sectors) {
    ProductEigenResult r = H.lowest(s, po);
    out.iterations += r.iterations;
    out.hproducts += r.hamiltonian_products;
    out.pproducts += r.preconditioner_products;
    out.seconds += r.seconds;
    out.tolerance = std::max(out.tolerance, r.tolerance_used);
    for (int i = 0; i < r.energies.size(); ++i) {
      ExactLevel L;
      L.spin = spin_state_name(s);
      L.index = i;
      L.energy = r.energies(i) + e_nn;
      L.residual = r.residuals(i);
      if (keep_densities) L.density = two_electron_density(mesh, r.coefficients[i]);
      out.levels.push_back(std::move(L));
      out.coefficients.push_back(std::move(r.coefficients[i]));
    }
  }
  return out;
}

SystemSpec exact_spec(const SystemSpec& spec) {
  SystemSpec s = spec;
  // Exchange-correlation settings play no role in the exact solution.
  s.xc.clear();
  s.xc_weights.clear();
  s.xc_parameters.clear();
  s.spin_polarized = false;
  s.n_up.reset();
  s.n_down.reset();
  s.occupations.clear();
  return s;
}

}  // namespace

ExactResult solve_exact(const SystemSpec& spec_in, const ExactOptions& o) {
  const auto t0 = Clock::now();
  const int electrons = checked_electrons(spec_in);
  if (o.states < 1) throw InputError("[exact] states must be >= 1");
  if (!(o.trust_density > 0)) throw InputError("[exact] trust_density must be positive (electrons/bohr)");
  const SystemSpec spec = exact_spec(spec_in);
  const KsProblem P(spec);
  const Mesh& mesh = P.mesh();
  const TwoElectronHamiltonian H(mesh, P.external_potential(), spec.line.electron_softening, spec.line.interacting);
  LevelSolve ls = solve_levels(P, H, electrons, o, true);

  ExactResult r(spec_in, mesh);
  r.electrons = electrons;
  r.v_ext = P.external_potential();
  r.nuclear_repulsion = P.nuclear_repulsion();
  r.levels = ls.levels;
  r.iterations = ls.iterations;
  r.hamiltonian_products = ls.hproducts;
  r.preconditioner_products = ls.pproducts;
  r.tolerance_used = ls.tolerance;
  r.density = r.levels.front().density;

  const int first = mesh.first_unknown(), nu = H.size();
  const Eigen::VectorXd v = r.v_ext.segment(first, nu);
  ExactEnergyParts& E = r.energy;
  E.nuclear_repulsion = r.nuclear_repulsion;
  E.total = r.levels.front().energy;
  E.electronic = E.total - E.nuclear_repulsion;
  E.external = (mesh.w().array() * r.density.array() * r.v_ext.array()).sum();
  if (electrons == 1) {
    const Eigen::VectorXd q = H.one_electron_vectors().col(0);
    E.kinetic = q.dot(H.kinetic() * q);
    E.electron_electron = 0.0;
    r.energy_minus_one = r.nuclear_repulsion;
  } else {
    const Eigen::MatrixXd& C = ls.coefficients.front();
    const Eigen::MatrixXd TC = H.kinetic() * C;
    E.kinetic = 2.0 * (C.array() * TC.array()).sum();
    E.electron_electron = (C.array().square() * H.interaction().array()).sum();
    r.energy_minus_one = H.one_electron_energies()(0) + r.nuclear_repulsion;
    if (o.pair_density) r.ground_coefficients = C;
  }
  // Above E(N-1) one electron can leave: with walls at ±L such a level is a box state whose
  // energy falls towards the threshold as L grows. Harmonic and tabulated potentials need not
  // vanish far out, so there no threshold is drawn.
  const bool confined = std::any_of(spec.line.potentials.begin(), spec.line.potentials.end(), [](const ExternalTerm& t) {
    return t.kind != ExternalTerm::Kind::Gaussian;
  });
  if (!confined) {
    r.threshold = r.energy_minus_one;
    for (ExactLevel& L : r.levels) L.bound = L.energy < *r.threshold;
  }
  const double homo = E.total - r.energy_minus_one;
  r.ks = exact_ks_potential(mesh, H.kinetic(), r.density, homo, electrons, o.trust_density);
  const Eigen::VectorXd& c = r.ks.orbital;
  E.kinetic_s = electrons * c.dot(H.kinetic() * c) / c.squaredNorm();
  r.v_h = P.hartree_potential(r.density);
  E.hartree = P.hartree() ? P.hartree()->energy(r.density, r.v_h) : 0.0;
  E.exchange = electrons == 2 ? -0.5 * E.hartree : -E.hartree;
  E.correlation = E.electronic - E.kinetic_s - E.external - E.hartree - E.exchange;
  r.v_hxc = r.ks.v_s - r.v_ext;
  r.v_xc = r.v_hxc - r.v_h;

  if (o.convergence_check && spec.nodal_potential.empty()) {
    for (const char* kind : {"degree", "box"}) {
      SystemSpec coarse = spec;
      if (std::string(kind) == "degree") {
        if (coarse.grid.degree < 4) continue;
        coarse.grid.degree -= 2;
      } else {
        coarse.grid.half_width *= 0.8;
      }
      ExactGridCheck gc;
      gc.kind = kind;
      gc.degree = coarse.grid.degree;
      gc.half_width = coarse.grid.half_width;
      try {
        const KsProblem Pc(coarse);
        const TwoElectronHamiltonian Hc(Pc.mesh(), Pc.external_potential(), spec.line.electron_softening,
                                        spec.line.interacting);
        gc.nodes = Pc.mesh().num_nodes();
        ExactOptions oc = o;
        oc.pair_density = false;
        const LevelSolve lc = solve_levels(Pc, Hc, electrons, oc, false);
        r.level_error_estimates.resize(r.levels.size(), 0.0);
        for (std::size_t i = 0; i < r.levels.size(); ++i) {
          const double d = r.levels[i].energy - lc.levels[i].energy;
          gc.level_changes.push_back(d);
          r.level_error_estimates[i] = std::max(r.level_error_estimates[i], std::abs(d));
          // Unbound levels measure the box, not the discretization of the system.
          if (r.levels[i].bound) gc.max_change = std::max(gc.max_change, std::abs(d));
        }
        const double minus_one_c = electrons == 2 ? Hc.one_electron_energies()(0) + Pc.nuclear_repulsion() : Pc.nuclear_repulsion();
        gc.homo_change = homo - (lc.levels.front().energy - minus_one_c);
        gc.max_change = std::max(gc.max_change, std::abs(gc.homo_change));
        r.iterations += lc.iterations;
        r.hamiltonian_products += lc.hproducts;
        r.preconditioner_products += lc.pproducts;
        r.grid_error_estimate = std::max(r.grid_error_estimate.value_or(0.0), gc.max_change);
        r.grid_checks.push_back(std::move(gc));
      } catch (const InputError&) {
        // The comparison grid is refused (too coarse for the softenings, or a nucleus too
        // close to the smaller box's wall): no estimate of this kind.
      }
    }
  }
  r.seconds = seconds_since(t0);
  return r;
}

}  // namespace stillpoint
