#pragma once
// Spectral-element mesh shared by the 1D line and the radial half-line.
//
// Functions are represented by their values at the global GLL nodes. Neighbouring elements
// share their end node, so a mesh of E elements of degree p has E*p + 1 nodes. Quadrature is
// the nodal GLL rule, which makes the mass matrix diagonal; every discrete energy in
// stillpoint is a sum over these nodes, and potentials are exact derivatives of those sums.
#include <Eigen/Dense>
#include <string>
#include <vector>

namespace stillpoint {

enum class Geometry {
  Line,    ///< x in [-L, L], Dirichlet at both ends
  Radial,  ///< r in [0, R], u = r R(r), Dirichlet at both ends
};

/// How to build a mesh. Presets in basis-data/grid-presets.toml fill this in.
struct MeshSpec {
  int degree = 8;             ///< polynomial degree of every element
  // Line only:
  double half_width = 20.0;   ///< L in bohr
  double element_size = 1.0;  ///< target element length in bohr (rounded so 2L is a multiple)
  // Radial only:
  int elements = 44;                 ///< number of elements
  double first_element = 1.0;        ///< first element length in bohr, before division by Z
  bool first_element_over_z = true;  ///< divide first_element by the nuclear charge
  double r_max = 80.0;               ///< outer radius in bohr
};

/// How a grid will be used: the memory of a banded solve grows with the node count N, a dense
/// one (invert) with N^2, the two-electron product grid (exact) with N^2 times its Davidson basis.
enum class GridUse { Banded, Dense, Product };

/// Size of the grid a MeshSpec asks for, in floating point so that absurd requests are
/// reported instead of overflowing an integer, with rough memory and time estimates.
struct GridCost {
  double elements = 0.0;
  double nodes = 0.0;
  double element_size = 0.0;  ///< line: the real element length 2L/E (bohr); radial: first element
  double bytes = 0.0;         ///< rough peak memory of one calculation on this grid
  double seconds = 0.0;       ///< rough run time on one core (order of magnitude only)
};

/// Peak memory a single grid may need before it is refused (bytes; docs/input.md).
inline constexpr double kMaxGridBytes = 4e9;

GridCost grid_cost(const MeshSpec& spec, Geometry geometry, GridUse use);

/// "4.2 GB"-style text of a byte count, and "3 min"-style text of a duration, for messages.
std::string format_bytes(double bytes);
std::string format_seconds(double seconds);

class Mesh {
 public:
  /// Uniform elements on [-L, L].
  static Mesh line(const MeshSpec& spec);
  /// Geometrically graded elements on [0, r_max]; first element of length
  /// first_element (/Z when first_element_over_z).
  static Mesh radial(const MeshSpec& spec, double nuclear_charge);

  Geometry geometry() const { return geometry_; }
  int degree() const { return degree_; }
  int num_elements() const { return static_cast<int>(bounds_.size()) - 1; }
  int num_nodes() const { return static_cast<int>(x_.size()); }
  /// Global index of local node a of element e.
  int node(int e, int a) const { return e * degree_ + a; }

  const Eigen::VectorXd& x() const { return x_; }
  /// Assembled GLL weights: integral of f dx (or dr) = sum_k w_k f_k.
  const Eigen::VectorXd& w() const { return w_; }
  /// Weights of a density: number of electrons = sum_k W_k n_k (W = w on the line, 4 pi r^2 w radially).
  const Eigen::VectorXd& density_weight() const { return W_; }
  const std::vector<double>& element_bounds() const { return bounds_; }
  /// Physical element-local quadrature weights (degree+1 values) of element e.
  Eigen::VectorXd element_weights(int e) const;
  /// Physical derivative matrix of element e (maps the element's nodal values to derivatives
  /// at its nodes). Used for orbitals and the kinetic energy.
  Eigen::MatrixXd element_derivative(int e) const;
  /// Derivative matrix used for density gradients. Equals element_derivative except in the
  /// first radial element, where the value at r = 0 is not a free density variable (it carries
  /// zero quadrature weight); there the interpolant through nodes 1..p is differentiated, so the
  /// discrete GGA energy is a function of the weighted nodes only.
  const Eigen::MatrixXd& density_derivative(int e) const { return density_derivative_[e]; }

  /// Interior nodes carry orbital unknowns; the two end nodes are Dirichlet.
  int first_unknown() const { return 1; }
  int num_unknowns() const { return num_nodes() - 2; }

  /// Human-readable description, e.g. "radial, 44 elements of degree 14, 617 nodes, r_max 80 bohr".
  std::string describe() const;

 private:
  Mesh() = default;
  void finish();

  Geometry geometry_ = Geometry::Line;
  int degree_ = 0;
  std::vector<double> bounds_;
  Eigen::VectorXd ref_nodes_, ref_weights_;
  Eigen::MatrixXd ref_derivative_;
  Eigen::VectorXd x_, w_, W_;
  std::vector<Eigen::MatrixXd> density_derivative_;
};

}  // namespace stillpoint
