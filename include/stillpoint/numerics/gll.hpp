#pragma once
// Gauss–Lobatto–Legendre (GLL) rules and Lagrange differentiation on [-1, 1].
//
// GLL nodes include the interval ends, which lets neighbouring spectral elements share a
// node (C0 continuity) and makes the nodal quadrature mass matrix diagonal.
#include <Eigen/Dense>

namespace stillpoint {

struct GllRule {
  int degree = 0;            ///< polynomial degree p; p + 1 nodes
  Eigen::VectorXd nodes;     ///< ascending, nodes(0) = -1, nodes(p) = 1
  Eigen::VectorXd weights;   ///< quadrature weights, exact for degree <= 2p - 1
  /// D(i, j) = l_j'(nodes(i)) for the Lagrange basis l_j through all nodes.
  Eigen::MatrixXd derivative;
};

/// GLL rule of the given degree (1 <= degree <= 64). Throws std::invalid_argument otherwise.
GllRule gll_rule(int degree);

/// Derivative matrix of the Lagrange interpolant through `support` evaluated at `points`:
/// result(i, j) = l_j'(points(i)). Points may coincide with support nodes.
Eigen::MatrixXd lagrange_derivative_matrix(const Eigen::VectorXd& support, const Eigen::VectorXd& points);

}  // namespace stillpoint
