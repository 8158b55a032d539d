#include "stillpoint/numerics/hartree.hpp"

#include <unsupported/Eigen/FFT>

#include <Eigen/SparseCholesky>
#include <cmath>
#include <complex>
#include <numbers>
#include <vector>

#include "stillpoint/common/errors.hpp"

namespace stillpoint {

namespace {
std::size_t fft_size(std::size_t n) {
  // Smallest 2^a 3^b 5^c >= n keeps kissfft on its fast radices.
  for (std::size_t m = n;; ++m) {
    std::size_t k = m;
    for (std::size_t f : {2, 3, 5})
      while (k % f == 0) k /= f;
    if (k == 1) return m;
  }
}
}  // namespace

struct Hartree::Impl {
  const Mesh* mesh = nullptr;
  // Radial
  Eigen::SimplicialLDLT<Eigen::SparseMatrix<double>> poisson;
  // Line
  double a = 1.0;
  std::size_t L = 0;
  std::vector<std::vector<std::complex<double>>> kernel_hat;  // (p+1)^2 spectra, index a*(p+1)+b
  mutable Eigen::FFT<double> fft;
};

Hartree::Hartree(const Mesh& mesh, double softening) : impl_(std::make_unique<Impl>()) {
  Impl& I = *impl_;
  I.mesh = &mesh;
  const int p = mesh.degree();
  if (mesh.geometry() == Geometry::Radial) {
    const int n = mesh.num_unknowns();
    std::vector<Eigen::Triplet<double>> trip;
    for (int e = 0; e < mesh.num_elements(); ++e) {
      const Eigen::MatrixXd D = mesh.element_derivative(e);
      const Eigen::VectorXd we = mesh.element_weights(e);
      const Eigen::MatrixXd Se = D.transpose() * we.asDiagonal() * D;
      for (int i = 0; i <= p; ++i)
        for (int j = 0; j <= p; ++j) {
          const int gi = mesh.node(e, i) - 1, gj = mesh.node(e, j) - 1;
          if (gi >= 0 && gj >= 0 && gi < n && gj < n) trip.emplace_back(gi, gj, Se(i, j));
        }
    }
    Eigen::SparseMatrix<double> S(n, n);
    S.setFromTriplets(trip.begin(), trip.end());
    I.poisson.compute(S);
    if (I.poisson.info() != Eigen::Success) throw NumericalError("radial Poisson factorization failed");
  } else {
    if (!(softening > 0)) throw InputError("the 1D electron-electron softening must be positive");
    I.a = softening;
    const int ne = mesh.num_elements();
    const double h = mesh.element_bounds()[1] - mesh.element_bounds()[0];
    const Eigen::VectorXd xi = (mesh.x().segment(0, p + 1).array() - mesh.element_bounds()[0]) / h;  // in [0, 1]
    I.L = fft_size(2 * static_cast<std::size_t>(ne));
    I.kernel_hat.resize(static_cast<std::size_t>((p + 1) * (p + 1)));
    std::vector<std::complex<double>> c(I.L);
    for (int ia = 0; ia <= p; ++ia)
      for (int ib = 0; ib <= p; ++ib) {
        std::fill(c.begin(), c.end(), 0.0);
        for (int d = -(ne - 1); d <= ne - 1; ++d) {
          const double dx = (d + xi(ia) - xi(ib)) * h;
          c[static_cast<std::size_t>((d + static_cast<long>(I.L)) % static_cast<long>(I.L))] =
              1.0 / std::sqrt(dx * dx + I.a * I.a);
        }
        I.fft.fwd(I.kernel_hat[ia * (p + 1) + ib], c);
      }
  }
}

Hartree::~Hartree() = default;
Hartree::Hartree(Hartree&&) noexcept = default;
Hartree& Hartree::operator=(Hartree&&) noexcept = default;

Eigen::VectorXd Hartree::potential(const Eigen::VectorXd& n) const {
  const Impl& I = *impl_;
  const Mesh& mesh = *I.mesh;
  const int N = mesh.num_nodes();
  const int p = mesh.degree();
  Eigen::VectorXd v = Eigen::VectorXd::Zero(N);
  const Eigen::VectorXd& W = mesh.density_weight();
  if (mesh.geometry() == Geometry::Radial) {
    const Eigen::VectorXd& r = mesh.x();
    const Eigen::VectorXd& w = mesh.w();
    const double Q = W.dot(n);
    const double R = r(N - 1);
    Eigen::VectorXd b(N - 2);
    for (int k = 1; k < N - 1; ++k) b(k - 1) = 4.0 * std::numbers::pi * w(k) * r(k) * n(k);
    const Eigen::VectorXd U = I.poisson.solve(b);
    Eigen::VectorXd Ufull(N);
    Ufull(0) = 0.0;
    for (int k = 1; k < N - 1; ++k) Ufull(k) = U(k - 1) + Q * r(k) / R;
    Ufull(N - 1) = Q;
    for (int k = 1; k < N; ++k) v(k) = Ufull(k) / r(k);
    // r -> 0 limit U'(0), only for output: the r = 0 node carries no weight.
    const Eigen::MatrixXd D = mesh.element_derivative(0);
    v(0) = D.row(0).dot(Ufull.segment(0, p + 1));
    return v;
  }
  const int ne = mesh.num_elements();
  std::vector<std::vector<std::complex<double>>> qhat(p + 1);
  std::vector<std::complex<double>> buf(I.L);
  for (int b = 0; b <= p; ++b) {
    std::fill(buf.begin(), buf.end(), 0.0);
    const Eigen::VectorXd we = mesh.element_weights(0);
    for (int e = 0; e < ne; ++e) buf[e] = we(b) * n(mesh.node(e, b));
    I.fft.fwd(qhat[b], buf);
  }
  std::vector<std::complex<double>> acc(I.L), out;
  for (int a = 0; a <= p; ++a) {
    std::fill(acc.begin(), acc.end(), 0.0);
    for (int b = 0; b <= p; ++b) {
      const auto& kh = I.kernel_hat[a * (p + 1) + b];
      for (std::size_t j = 0; j < I.L; ++j) acc[j] += kh[j] * qhat[b][j];
    }
    I.fft.inv(out, acc);
    for (int e = 0; e < ne; ++e) v(mesh.node(e, a)) = out[e].real();
  }
  return v;
}

double Hartree::energy(const Eigen::VectorXd& n, const Eigen::VectorXd& v) const {
  return 0.5 * impl_->mesh->density_weight().dot(n.cwiseProduct(v));
}

}  // namespace stillpoint
