#include "stillpoint/numerics/mesh.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <iomanip>
#include <numbers>
#include <sstream>
#include <stdexcept>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/gll.hpp"

namespace stillpoint {

namespace {

double line_elements(const MeshSpec& spec) {
  return std::max(2.0, std::ceil(2.0 * spec.half_width / spec.element_size - 1e-9));
}

// Checked before any vector is sized: the int node count and the memory must both fit.
void check_size(const MeshSpec& spec, Geometry g) {
  const GridCost c = grid_cost(spec, g, GridUse::Banded);
  if (!(c.nodes < 2e9) || !(c.bytes <= kMaxGridBytes)) {
    std::ostringstream m;
    m << "the grid would have " << std::setprecision(3) << c.nodes << " nodes and need about " << format_bytes(c.bytes)
      << " (limit " << format_bytes(kMaxGridBytes) << "); "
      << (g == Geometry::Line ? "raise element_size or lower half_width" : "lower elements or degree");
    throw InputError(m.str());
  }
}

}  // namespace

GridCost grid_cost(const MeshSpec& spec, Geometry geometry, GridUse use) {
  GridCost c;
  const double p = spec.degree;
  if (geometry == Geometry::Line) {
    c.elements = line_elements(spec);
    c.element_size = 2.0 * spec.half_width / c.elements;
  } else {
    c.elements = spec.elements;
    c.element_size = spec.first_element;
  }
  c.nodes = c.elements * p + 1.0;
  const double N = c.nodes;
  // Coefficients fitted to peak resident memory and wall time of this program (one core,
  // OpenBLAS single-threaded; baseline of ~12 MB removed): solve, 1.6 kB per node at degree
  // 8 (32001 and 128001 nodes: 61 and 211 MB, 2.2 and 54 s); invert, 76 N^2 bytes and
  // 7e-9 N^3 s (961 nodes: 82 MB, 6 s); exact, 560 N^2 bytes and 8e-8 N^3 s including its
  // grid checks (801 nodes: 360 MB, 40 s). Rounded up: an estimate, not a promise.
  switch (use) {
    case GridUse::Banded:
      c.bytes = 8.0 * N * (12.0 * (p + 1.0) + 96.0);
      c.seconds = 3e-9 * N * N;
      break;
    case GridUse::Dense:
      c.bytes = 96.0 * N * N;
      c.seconds = 7e-9 * N * N * N;
      break;
    case GridUse::Product:
      c.bytes = 640.0 * N * N;
      c.seconds = 1e-7 * N * N * N;
      break;
  }
  return c;
}

std::string format_bytes(double bytes) {
  char buf[64];
  if (bytes < 1e6)
    std::snprintf(buf, sizeof buf, "%.3g kB", bytes / 1e3);
  else if (bytes < 1e9)
    std::snprintf(buf, sizeof buf, "%.3g MB", bytes / 1e6);
  else
    std::snprintf(buf, sizeof buf, "%.3g GB", bytes / 1e9);
  return buf;
}

std::string format_seconds(double s) {
  char buf[64];
  if (s < 120)
    std::snprintf(buf, sizeof buf, "%.2g s", s);
  else if (s < 7200)
    std::snprintf(buf, sizeof buf, "%.2g min", s / 60);
  else if (s < 3 * 86400)
    std::snprintf(buf, sizeof buf, "%.2g h", s / 3600);
  else
    std::snprintf(buf, sizeof buf, "%.3g days", s / 86400);
  return buf;
}

Mesh Mesh::line(const MeshSpec& spec) {
  if (spec.degree < 2 || spec.degree > 32) throw InputError("grid degree must be between 2 and 32");
  if (!(spec.half_width > 0) || !(spec.element_size > 0))
    throw InputError("grid half_width and element_size must be positive");
  check_size(spec, Geometry::Line);
  Mesh m;
  m.geometry_ = Geometry::Line;
  m.degree_ = spec.degree;
  const int ne = static_cast<int>(line_elements(spec));
  const double h = 2.0 * spec.half_width / ne;
  for (int e = 0; e <= ne; ++e) m.bounds_.push_back(-spec.half_width + e * h);
  m.finish();
  return m;
}

Mesh Mesh::radial(const MeshSpec& spec, double Z) {
  if (spec.degree < 2 || spec.degree > 32) throw InputError("grid degree must be between 2 and 32");
  if (spec.elements < 2) throw InputError("radial grid needs at least 2 elements");
  check_size(spec, Geometry::Radial);
  const double h0 = spec.first_element / (spec.first_element_over_z ? std::max(Z, 1.0) : 1.0);
  if (!(h0 > 0) || !(spec.r_max > h0 * spec.elements * 0.5))
    throw InputError("radial grid: first_element and r_max are inconsistent");
  // Ratio q of the geometric sequence with h0 (q^E - 1)/(q - 1) = r_max, by bisection.
  const int E = spec.elements;
  auto total = [&](double q) { return std::abs(q - 1.0) < 1e-12 ? h0 * E : h0 * (std::pow(q, E) - 1.0) / (q - 1.0); };
  double lo = 1.0, hi = 2.0;
  if (total(1.0) > spec.r_max) {
    lo = 0.1;
    hi = 1.0;
  }
  while (total(hi) < spec.r_max) hi *= 2.0;
  for (int it = 0; it < 200; ++it) {
    const double mid = 0.5 * (lo + hi);
    (total(mid) < spec.r_max ? lo : hi) = mid;
  }
  const double q = 0.5 * (lo + hi);
  Mesh m;
  m.geometry_ = Geometry::Radial;
  m.degree_ = spec.degree;
  double r = 0.0, h = h0;
  m.bounds_.push_back(0.0);
  for (int e = 0; e < E; ++e) {
    r += h;
    h *= q;
    m.bounds_.push_back(r);
  }
  m.bounds_.back() = spec.r_max;
  m.finish();
  return m;
}

void Mesh::finish() {
  const GllRule rule = gll_rule(degree_);
  ref_nodes_ = rule.nodes;
  ref_weights_ = rule.weights;
  ref_derivative_ = rule.derivative;
  const int ne = num_elements();
  const int n = ne * degree_ + 1;
  x_.setZero(n);
  w_.setZero(n);
  for (int e = 0; e < ne; ++e) {
    const double a = bounds_[e], b = bounds_[e + 1];
    for (int k = 0; k <= degree_; ++k) {
      x_(node(e, k)) = 0.5 * (a + b) + 0.5 * (b - a) * ref_nodes_(k);
      w_(node(e, k)) += 0.5 * (b - a) * ref_weights_(k);
    }
    x_(node(e, 0)) = a;
    x_(node(e, degree_)) = b;
  }
  if (geometry_ == Geometry::Radial)
    W_ = (4.0 * std::numbers::pi) * x_.array().square() * w_.array();
  else
    W_ = w_;
  density_derivative_.clear();
  for (int e = 0; e < ne; ++e) {
    if (e == 0 && geometry_ == Geometry::Radial) {
      const Eigen::VectorXd pts = ref_nodes_;
      const Eigen::VectorXd support = ref_nodes_.tail(degree_);
      const Eigen::MatrixXd Dsub = lagrange_derivative_matrix(support, pts);
      Eigen::MatrixXd D = Eigen::MatrixXd::Zero(degree_ + 1, degree_ + 1);
      D.rightCols(degree_) = Dsub;
      density_derivative_.push_back(D * (2.0 / (bounds_[1] - bounds_[0])));
    } else {
      density_derivative_.push_back(element_derivative(e));
    }
  }
}

Eigen::VectorXd Mesh::element_weights(int e) const {
  return ref_weights_ * (0.5 * (bounds_[e + 1] - bounds_[e]));
}

Eigen::MatrixXd Mesh::element_derivative(int e) const {
  return ref_derivative_ * (2.0 / (bounds_[e + 1] - bounds_[e]));
}

std::string Mesh::describe() const {
  std::ostringstream s;
  s << (geometry_ == Geometry::Radial ? "radial, " : "line, ") << num_elements() << " elements of degree "
    << degree_ << ", " << num_nodes() << " nodes, ";
  if (geometry_ == Geometry::Radial)
    s << "first element " << bounds_[1] << " bohr, r_max " << bounds_.back() << " bohr";
  else
    s << "x in [" << bounds_.front() << ", " << bounds_.back() << "] bohr";
  return s.str();
}

}  // namespace stillpoint
