// Benchmark of `stillpoint exact`: two electrons (1D He, Z = 2, both softenings 1 bohr) on the
// product grid. Prints text; called as exact_report() from bench/main.cpp.
//
// 1. Time to the singlet ground state against the grid (about 100, 200, 400, 800 nodes in a
//    fixed box, so the spacing shrinks), with the fitted exponent of time against nodes.
// 2. The eigensolver choice at fixed grids: our block Davidson with the Kronecker
//    (fast-diagonalization) preconditioner against Spectra's plain Lanczos (SymEigsSolver on
//    H), Spectra's Davidson with its diagonal (DPR) correction, and Spectra shift-invert
//    Lanczos whose inner solves are conjugate gradients with the same Kronecker preconditioner.
//    Every method works in the same symmetric (singlet) space and is stopped at a residual of
//    about 1e-10 hartree.
//
// All timings are single-threaded (OPENBLAS_NUM_THREADS=1): wall-clock seconds, and in the
// grid table also the thread's CPU seconds (which do not depend on other load).
#include <Spectra/DavidsonSymEigsSolver.h>
#include <Spectra/SymEigsShiftSolver.h>
#include <Spectra/SymEigsSolver.h>

#include <time.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <functional>
#include <string>
#include <vector>

#include "stillpoint/exact/two_electron.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/problem.hpp"

void exact_report();

namespace {

namespace sp = stillpoint;
using Clock = std::chrono::steady_clock;

double since(Clock::time_point t0) { return std::chrono::duration<double>(Clock::now() - t0).count(); }

/// CPU time of this thread: the honest measure of single-threaded work on a shared machine.
double cpu_now() {
  timespec ts{};
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return ts.tv_sec + 1e-9 * ts.tv_nsec;
}

sp::SystemSpec helium(int elements) {
  sp::SystemSpec s;
  s.name = "He";
  s.geometry = sp::Geometry::Line;
  s.line.nuclei = {{2.0, 0.0, 1.0}};
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  s.grid.degree = 8;
  s.grid.half_width = 15.0;
  s.grid.element_size = 30.0 / elements;
  return s;
}

/// The singlet space as packed vectors u (i <= j): C_ii = u, C_ij = C_ji = u / sqrt(2), an
/// isometry, so the packed operator is exactly H restricted to symmetric C.
struct PackedSinglet {
  using Scalar = double;
  const sp::TwoElectronHamiltonian* H = nullptr;
  int n = 0;
  mutable Eigen::MatrixXd C, HC;
  mutable long products = 0;
  Eigen::Index rows() const { return static_cast<Eigen::Index>(n) * (n + 1) / 2; }
  Eigen::Index cols() const { return rows(); }
  void unpack(const double* u, Eigen::MatrixXd& M) const {
    M.resize(n, n);
    std::size_t p = 0;
    for (int j = 0; j < n; ++j)
      for (int i = 0; i <= j; ++i, ++p) M(i, j) = M(j, i) = i == j ? u[p] : u[p] * M_SQRT1_2;
  }
  void pack(const Eigen::MatrixXd& M, double* u) const {
    std::size_t p = 0;
    for (int j = 0; j < n; ++j)
      for (int i = 0; i <= j; ++i, ++p) u[p] = i == j ? M(i, i) : M(i, j) * M_SQRT2;
  }
  void perform_op(const double* x, double* y) const {
    unpack(x, C);
    H->apply(C, HC, sp::ExchangeSymmetry::Symmetric);
    pack(HC, y);
    ++products;
  }
  // For Spectra's Davidson: products with blocks and the diagonal.
  Eigen::MatrixXd operator*(const Eigen::Ref<const Eigen::MatrixXd>& X) const {
    Eigen::MatrixXd Y(X.rows(), X.cols());
    for (int c = 0; c < X.cols(); ++c) perform_op(X.col(c).data(), Y.col(c).data());
    return Y;
  }
  double operator()(Eigen::Index a, Eigen::Index b) const {
    if (a != b) return 0.0;  // only the diagonal is asked for
    if (diagonal.size() == 0) {
      diagonal.resize(rows());
      Eigen::Index p = 0;
      for (int j = 0; j < n; ++j)
        for (int i = 0; i <= j; ++i, ++p)
          diagonal(p) = H->kinetic().coeff(i, i) + H->kinetic().coeff(j, j) + H->pair_potential()(i, j);
    }
    return diagonal(a);
  }
  mutable Eigen::VectorXd diagonal;
};

PackedSinglet packed(const sp::TwoElectronHamiltonian& H) {
  PackedSinglet p;
  p.H = &H;
  p.n = H.size();
  return p;
}

/// (H - sigma)^{-1} by preconditioned conjugate gradients in the packed singlet space.
struct ShiftInvertPcg {
  using Scalar = double;
  PackedSinglet A;
  double sigma = 0.0, prec_shift = 0.0;
  mutable long inner = 0, solves = 0;
  Eigen::Index rows() const { return A.rows(); }
  Eigen::Index cols() const { return A.cols(); }
  void set_shift(double) {}
  void perform_op(const double* x, double* y) const {
    const Eigen::Index m = rows();
    Eigen::Map<const Eigen::VectorXd> b(x, m);
    Eigen::Map<Eigen::VectorXd> u(y, m);
    Eigen::VectorXd r = b, z(m), p(m), q(m);
    u.setZero();
    Eigen::MatrixXd R, Z;
    auto prec = [&](const Eigen::VectorXd& in, Eigen::VectorXd& out) {
      A.unpack(in.data(), R);
      A.H->precondition(R, prec_shift, Z, sp::ExchangeSymmetry::Symmetric);
      A.pack(Z, out.data());
    };
    prec(r, z);
    p = z;
    double rz = r.dot(z);
    const double bnorm = b.norm();
    for (int it = 0; it < 500 && r.norm() > 1e-13 * bnorm; ++it) {
      A.perform_op(p.data(), q.data());
      q -= sigma * p;
      const double alpha = rz / p.dot(q);
      u += alpha * p;
      r -= alpha * q;
      prec(r, z);
      const double rz_new = r.dot(z);
      p = z + (rz_new / rz) * p;
      rz = rz_new;
      ++inner;
    }
    ++solves;
  }
};

struct Row {
  explicit Row(std::string m) : method(std::move(m)) {}
  std::string method;
  bool ok = false;
  double energy = 0.0, seconds = 0.0;
  long products = 0, preconditioner = 0;
  std::string note;
};

void print_row(const Row& r, double e_ref) {
  if (!r.ok) {
    std::printf("    %-52s %s\n", r.method.c_str(), r.note.c_str());
    return;
  }
  std::printf("    %-52s %8.3f s  %7ld H  %6ld prec.  dE %.1e Ha  %s\n", r.method.c_str(), r.seconds, r.products,
              r.preconditioner, std::abs(r.energy - e_ref), r.note.c_str());
}

double fitted_exponent(const std::vector<double>& x, const std::vector<double>& y) {
  double mx = 0, my = 0;
  for (std::size_t i = 0; i < x.size(); ++i) mx += std::log(x[i]), my += std::log(y[i]);
  mx /= x.size();
  my /= y.size();
  double sxy = 0, sxx = 0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    sxy += (std::log(x[i]) - mx) * (std::log(y[i]) - my);
    sxx += (std::log(x[i]) - mx) * (std::log(x[i]) - mx);
  }
  return sxy / sxx;
}

}  // namespace

void exact_report() {
  std::printf("\nExact two-electron 1D He (Z = 2, softenings 1 bohr; box [-15, 15] bohr, degree 8), singlet ground state:\n");
  std::printf("  block Davidson + Kronecker preconditioner; setup = h eigenvectors and w(x1 - x2), solve = eigensolver\n");
  std::printf("  %6s %9s %9s %5s %5s %9s %9s %9s %9s  %s\n", "nodes", "unknowns", "singlet", "iter", "prec", "setup s",
              "solve s", "total s", "CPU s", "E (Ha)");
  std::vector<double> nodes, totals, solves, cpus;
  for (int elements : {12, 25, 50, 100}) {
    const sp::SystemSpec s = helium(elements);
    const sp::KsProblem P(s);
    const auto t0 = Clock::now();
    const double c0 = cpu_now();
    const sp::TwoElectronHamiltonian H(P.mesh(), P.external_potential(), 1.0, true);
    const double setup = since(t0);
    sp::ProductEigenOptions o;
    const sp::ProductEigenResult r = H.lowest(sp::ExchangeSymmetry::Symmetric, o);
    const double total = since(t0), cpu = cpu_now() - c0;
    const long n = H.size();
    std::printf("  %6d %9ld %9ld %5d %5d %9.3f %9.3f %9.3f %9.3f  %.10f\n", P.mesh().num_nodes(), n * n, n * (n + 1) / 2,
                r.iterations, r.preconditioner_products, setup, r.seconds, total, cpu, r.energies(0));
    nodes.push_back(P.mesh().num_nodes());
    totals.push_back(total);
    solves.push_back(r.seconds);
    cpus.push_back(cpu);
  }
  std::printf("  fitted exponent of time against nodes: total %.2f, eigensolver %.2f, CPU %.2f (the O(N^3) dense products\n"
              "  of the preconditioner dominate; the iteration count does not grow with the grid). Reference\n"
              "  E = -2.23825782 Ha (check-values.md section 2).\n",
              fitted_exponent(nodes, totals), fitted_exponent(nodes, solves), fitted_exponent(nodes, cpus));

  std::printf("\n  Eigensolver choice, same singlet space, residual about 1e-10 Ha (dE against our result):\n");
  for (int elements : {12, 25, 50}) {
    const sp::SystemSpec s = helium(elements);
    const sp::KsProblem P(s);
    const sp::TwoElectronHamiltonian H(P.mesh(), P.external_potential(), 1.0, true);
    std::printf("  %d nodes (%d singlet unknowns):\n", P.mesh().num_nodes(), H.size() * (H.size() + 1) / 2);
    Row ours("block Davidson + Kronecker preconditioner");
    {
      const auto t0 = Clock::now();
      const auto r = H.lowest(sp::ExchangeSymmetry::Symmetric, {});
      ours.seconds = since(t0);
      ours.ok = true;
      ours.energy = r.energies(0);
      ours.products = r.hamiltonian_products;
      ours.preconditioner = r.preconditioner_products;
      ours.note = std::to_string(r.iterations) + " iterations";
    }
    print_row(ours, ours.energy);
    const double tol_rel = 1e-10 / std::abs(ours.energy);
    // Plain Lanczos on H.
    {
      PackedSinglet op = packed(H);
      Row row("Spectra SymEigsSolver (Lanczos on H), ncv 30");
      const auto t0 = Clock::now();
      Spectra::SymEigsSolver<PackedSinglet> eigs(op, 1, 30);
      eigs.init();
      const int maxit = elements >= 50 ? 400 : 2000;
      eigs.compute(Spectra::SortRule::SmallestAlge, maxit, tol_rel);
      row.seconds = since(t0);
      row.products = op.products;
      if (eigs.info() == Spectra::CompInfo::Successful) {
        row.ok = true;
        row.energy = eigs.eigenvalues()(0);
        row.note = std::to_string(eigs.num_iterations()) + " restarts";
      } else {
        row.note = "not converged after " + std::to_string(op.products) + " products";
      }
      print_row(row, ours.energy);
    }
    // Spectra Davidson with the diagonal correction.
    if (elements <= 25) {
      PackedSinglet op = packed(H);
      Row row("Spectra DavidsonSymEigsSolver (diagonal DPR)");
      const auto t0 = Clock::now();
      Spectra::DavidsonSymEigsSolver<PackedSinglet> eigs(op, 1, 2, 40);
      eigs.compute(Spectra::SortRule::SmallestAlge, 3000, 1e-10);
      row.seconds = since(t0);
      row.products = op.products;
      if (eigs.info() == Spectra::CompInfo::Successful) {
        row.ok = true;
        row.energy = eigs.eigenvalues()(0);
        row.note = std::to_string(eigs.num_iterations()) + " iterations";
      } else {
        row.note = std::string(eigs.info() == Spectra::CompInfo::NumericalIssue ? "failed (numerical issue)" : "not converged") +
                   " after " + std::to_string(op.products) + " products";
      }
      print_row(row, ours.energy);
    }
    // Shift-invert Lanczos with PCG inner solves.
    if (elements <= 25) {
      ShiftInvertPcg op;
      op.A = packed(H);
      const double lowest_pair = 2.0 * H.one_electron_energies()(0);
      op.sigma = lowest_pair - 0.1;
      op.prec_shift = lowest_pair - 0.1 - 0.5;  // H0 + (mean interaction ~ 0.5) - sigma
      Row row("Spectra shift-invert Lanczos, Kronecker-PCG inner");
      const auto t0 = Clock::now();
      Spectra::SymEigsShiftSolver<ShiftInvertPcg> eigs(op, 1, 10, op.sigma);
      eigs.init();
      eigs.compute(Spectra::SortRule::LargestMagn, 200, 1e-10);
      row.seconds = since(t0);
      row.products = op.A.products;
      row.preconditioner = op.inner + op.solves;
      if (eigs.info() == Spectra::CompInfo::Successful) {
        row.ok = true;
        row.energy = eigs.eigenvalues()(0);
        row.note = std::to_string(op.solves) + " inner solves";
      } else {
        row.note = "not converged";
      }
      print_row(row, ours.energy);
    }
  }
}
