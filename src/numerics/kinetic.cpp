#include "stillpoint/numerics/kinetic.hpp"

#include <cmath>
#include <vector>

namespace stillpoint {

Eigen::SparseMatrix<double> scaled_kinetic(const Mesh& mesh, int l) {
  const int p = mesh.degree();
  const int n = mesh.num_unknowns();
  const int first = mesh.first_unknown();
  const Eigen::VectorXd& w = mesh.w();
  std::vector<Eigen::Triplet<double>> trip;
  trip.reserve(static_cast<std::size_t>(mesh.num_elements()) * (p + 1) * (p + 1));
  for (int e = 0; e < mesh.num_elements(); ++e) {
    const Eigen::MatrixXd D = mesh.element_derivative(e);
    const Eigen::VectorXd we = mesh.element_weights(e);
    const Eigen::MatrixXd Ke = 0.5 * D.transpose() * we.asDiagonal() * D;
    for (int a = 0; a <= p; ++a)
      for (int b = 0; b <= p; ++b) {
        const int i = mesh.node(e, a) - first, j = mesh.node(e, b) - first;
        if (i < 0 || j < 0 || i >= n || j >= n) continue;
        trip.emplace_back(i, j, Ke(a, b) / std::sqrt(w(i + first) * w(j + first)));
      }
  }
  if (mesh.geometry() == Geometry::Radial && l > 0) {
    for (int i = 0; i < n; ++i) {
      const double r = mesh.x()(i + first);
      trip.emplace_back(i, i, 0.5 * l * (l + 1.0) / (r * r));
    }
  }
  Eigen::SparseMatrix<double> T(n, n);
  T.setFromTriplets(trip.begin(), trip.end());
  return T;
}

}  // namespace stillpoint
