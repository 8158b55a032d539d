#include "stillpoint/xc/on_mesh.hpp"

#include <cmath>
#include <limits>
#include <numbers>

namespace stillpoint {

namespace {

struct PointMap {
  std::vector<int> node;     // global node of each evaluated point
  std::vector<int> element;  // its element
  std::vector<int> local;    // its local index
  std::vector<double> weight;
};

// Gathers the element-local quadrature points above the density threshold.
PointMap gather(const Mesh& mesh, const std::vector<Eigen::VectorXd>& n, bool gradient, double thr,
                XcPointData& pts, std::vector<double>& grad) {
  const int ns = static_cast<int>(n.size());
  const int p = mesh.degree();
  PointMap map;
  pts.nspin = ns;
  pts.rho.clear();
  pts.sigma.clear();
  grad.clear();
  const bool radial = mesh.geometry() == Geometry::Radial;
  for (int e = 0; e < mesh.num_elements(); ++e) {
    const Eigen::VectorXd we = mesh.element_weights(e);
    const Eigen::MatrixXd& D = mesh.density_derivative(e);
    for (int q = 0; q <= p; ++q) {
      const int k = mesh.node(e, q);
      double wq = we(q);
      if (radial) wq *= 4.0 * std::numbers::pi * mesh.x()(k) * mesh.x()(k);
      if (wq <= 0.0) continue;
      double tot = 0.0;
      for (int s = 0; s < ns; ++s) tot += n[s](k);
      if (!(tot >= thr)) continue;
      map.node.push_back(k);
      map.element.push_back(e);
      map.local.push_back(q);
      map.weight.push_back(wq);
      double g[2] = {0.0, 0.0};
      for (int s = 0; s < ns; ++s) {
        pts.rho.push_back(std::max(n[s](k), 0.0));
        if (gradient) {
          double gs = 0.0;
          for (int a = 0; a <= p; ++a) gs += D(q, a) * n[s](mesh.node(e, a));
          g[s] = gs;
          grad.push_back(gs);
        }
      }
      if (gradient) {
        if (ns == 1) {
          pts.sigma.push_back(g[0] * g[0]);
        } else {
          pts.sigma.push_back(g[0] * g[0]);
          pts.sigma.push_back(g[0] * g[1]);
          pts.sigma.push_back(g[1] * g[1]);
        }
      }
    }
  }
  pts.np = map.node.size();
  return map;
}

// v_s,k = (1/W_k) dE/dn_s,k from point derivatives e_n (vrho) and e_sigma (vsigma): the LDA
// part lands on the point's node, the gradient part goes through the element's D matrix.
std::vector<Eigen::VectorXd> assemble_potential(const Mesh& mesh, const PointMap& map, const std::vector<double>& grad,
                                                int ns, bool gradient, const std::vector<double>& vrho,
                                                const std::vector<double>& vsigma) {
  const int p = mesh.degree();
  std::vector<Eigen::VectorXd> dE(ns, Eigen::VectorXd::Zero(mesh.num_nodes()));
  for (std::size_t i = 0; i < map.node.size(); ++i) {
    const double wq = map.weight[i];
    for (int s = 0; s < ns; ++s) dE[s](map.node[i]) += wq * vrho[ns * i + s];
    if (gradient) {
      // dE/dg_s for the gradient g_s = (D n_s)_q, then through D to the element's nodes.
      double dg[2];
      if (ns == 1) {
        dg[0] = 2.0 * vsigma[i] * grad[i];
      } else {
        const double g0 = grad[2 * i], g1 = grad[2 * i + 1];
        dg[0] = 2.0 * vsigma[3 * i] * g0 + vsigma[3 * i + 1] * g1;
        dg[1] = 2.0 * vsigma[3 * i + 2] * g1 + vsigma[3 * i + 1] * g0;
      }
      const Eigen::MatrixXd& D = mesh.density_derivative(map.element[i]);
      const int q = map.local[i], e = map.element[i];
      for (int s = 0; s < ns; ++s)
        for (int a = 0; a <= p; ++a) dE[s](mesh.node(e, a)) += wq * dg[s] * D(q, a);
    }
  }
  const Eigen::VectorXd& W = mesh.density_weight();
  for (int s = 0; s < ns; ++s)
    for (int k = 0; k < mesh.num_nodes(); ++k) dE[s](k) = W(k) > 0.0 ? dE[s](k) / W(k) : 0.0;
  return dE;
}

// Per point, the mixed and pure second derivatives of e(n_s, g_s) in the gradients g_s = (D n_s)_q
// (ns x ns blocks, row-major), from libxc's derivatives in sigma.
void gradient_blocks(const XcDerivatives& d, const std::vector<double>& grad, std::size_t i, int ns, double* ng,
                     double* gg) {
  if (ns == 1) {
    // sigma = g^2: e_g = 2 g e_s, e_gg = 2 e_s + 4 g^2 e_ss, e_ng = 2 g e_ns.
    const double g = grad[i];
    ng[0] = 2.0 * g * d.v2rhosigma[i];
    gg[0] = 2.0 * d.vsigma[i] + 4.0 * g * g * d.v2sigma2[i];
    return;
  }
  // sigma_a(g) for a = (uu, ud, dd); J(a, s) = d sigma_a / d g_s.
  const double gu = grad[2 * i], gd = grad[2 * i + 1];
  const double J[3][2] = {{2.0 * gu, 0.0}, {gd, gu}, {0.0, 2.0 * gd}};
  const double* vs = &d.vsigma[3 * i];
  const double* rs = &d.v2rhosigma[6 * i];  // (s, a) rho-index-major
  const double* s2 = &d.v2sigma2[6 * i];    // upper triangle of (a, b)
  const double S[3][3] = {{s2[0], s2[1], s2[2]}, {s2[1], s2[3], s2[4]}, {s2[2], s2[4], s2[5]}};
  for (int s = 0; s < 2; ++s)
    for (int t = 0; t < 2; ++t) {
      double v = 0.0;
      for (int a = 0; a < 3; ++a) v += rs[3 * s + a] * J[a][t];
      ng[2 * s + t] = v;  // d^2 e / dn_s dg_t
      double w = 0.0;
      for (int a = 0; a < 3; ++a)
        for (int b = 0; b < 3; ++b) w += J[a][s] * S[a][b] * J[b][t];
      gg[2 * s + t] = w;
    }
  // Second derivatives of sigma itself: d2 s_uu/dgu2 = 2, d2 s_ud/dgu dgd = 1, d2 s_dd/dgd2 = 2.
  gg[0] += 2.0 * vs[0];
  gg[1] += vs[1];
  gg[2] += vs[1];
  gg[3] += 2.0 * vs[2];
}

}  // namespace

XcOnMesh evaluate_xc(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& n,
                     double thr) {
  const int ns = static_cast<int>(n.size());
  XcOnMesh out;
  out.potential.assign(ns, Eigen::VectorXd::Zero(mesh.num_nodes()));
  if (xc.empty()) return out;
  const bool gradient = xc.needs_gradient();
  XcPointData pts;
  std::vector<double> grad;
  const PointMap map = gather(mesh, n, gradient, thr, pts, grad);
  XcDerivatives d;
  xc.evaluate(pts, 1, d);
  for (std::size_t i = 0; i < pts.np; ++i) out.energy += map.weight[i] * d.e[i];
  out.potential = assemble_potential(mesh, map, grad, ns, gradient, d.vrho, d.vsigma);
  return out;
}

double xc_energy(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& n, double thr) {
  if (xc.empty()) return 0.0;
  XcPointData pts;
  std::vector<double> grad;
  const PointMap map = gather(mesh, n, xc.needs_gradient(), thr, pts, grad);
  XcDerivatives d;
  xc.evaluate(pts, 1, d);
  double E = 0.0;
  for (std::size_t i = 0; i < pts.np; ++i) E += map.weight[i] * d.e[i];
  return E;
}

}  // namespace stillpoint

namespace stillpoint {

XcKernel::XcKernel(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& n, double thr)
    : mesh_(&mesh), ns_(static_cast<int>(n.size())), gradient_(xc.needs_gradient()) {
  if (xc.empty()) return;
  XcPointData pts;
  std::vector<double> grad;
  const PointMap map = gather(mesh, n, gradient_, thr, pts, grad);
  node_ = map.node;
  element_ = map.element;
  local_ = map.local;
  weight_ = map.weight;
  XcDerivatives d;
  xc.evaluate(pts, 2, d);
  const int ns = ns_;
  const std::size_t np = pts.np;
  enn_.assign(np * ns * ns, 0.0);
  eng_.assign(np * ns * ns, 0.0);
  egg_.assign(np * ns * ns, 0.0);
  for (std::size_t i = 0; i < np; ++i) {
    double* nn = &enn_[i * ns * ns];
    if (ns == 1) {
      nn[0] = d.v2rho2[i];
    } else {
      nn[0] = d.v2rho2[3 * i];
      nn[1] = nn[2] = d.v2rho2[3 * i + 1];
      nn[3] = d.v2rho2[3 * i + 2];
    }
    if (gradient_) gradient_blocks(d, grad, i, ns, &eng_[i * ns * ns], &egg_[i * ns * ns]);
  }
}

std::vector<Eigen::VectorXd> XcKernel::apply(const std::vector<Eigen::VectorXd>& dn) const {
  const Mesh& mesh = *mesh_;
  const int ns = ns_;
  const int p = mesh.degree();
  std::vector<Eigen::VectorXd> acc(ns, Eigen::VectorXd::Zero(mesh.num_nodes()));
  for (std::size_t i = 0; i < node_.size(); ++i) {
    const int k = node_[i], e = element_[i], q = local_[i];
    const double wq = weight_[i];
    double dnq[2] = {0, 0}, dgq[2] = {0, 0};
    const Eigen::MatrixXd& D = mesh.density_derivative(e);
    for (int s = 0; s < ns; ++s) {
      dnq[s] = dn[s](k);
      if (gradient_)
        for (int a = 0; a <= p; ++a) dgq[s] += D(q, a) * dn[s](mesh.node(e, a));
    }
    const double* nn = &enn_[i * ns * ns];
    const double* ng = gradient_ ? &eng_[i * ns * ns] : nullptr;
    const double* gg = gradient_ ? &egg_[i * ns * ns] : nullptr;
    for (int s = 0; s < ns; ++s) {
      double a = 0.0, b = 0.0;
      for (int t = 0; t < ns; ++t) {
        a += nn[ns * s + t] * dnq[t];
        if (gradient_) {
          a += ng[ns * s + t] * dgq[t];
          b += ng[ns * t + s] * dnq[t] + gg[ns * s + t] * dgq[t];
        }
      }
      acc[s](k) += wq * a;
      if (gradient_)
        for (int c = 0; c <= p; ++c) acc[s](mesh.node(e, c)) += wq * b * D(q, c);
    }
  }
  const Eigen::VectorXd& W = mesh.density_weight();
  for (int s = 0; s < ns; ++s)
    for (int k = 0; k < mesh.num_nodes(); ++k) acc[s](k) = W(k) > 0.0 ? acc[s](k) / W(k) : 0.0;
  return acc;
}

}  // namespace stillpoint

namespace stillpoint {

XcParameterDerivative xc_parameter_derivative(const Mesh& mesh, const XcFunctional& xc, std::size_t term, int p,
                                              const std::vector<Eigen::VectorXd>& n, double thr) {
  const int ns = static_cast<int>(n.size());
  XcParameterDerivative out;
  const XcTerm& t = xc.term(term);
  const bool gradient = xc.needs_gradient();
  XcPointData pts;
  std::vector<double> grad;
  const PointMap map = gather(mesh, n, gradient, thr, pts, grad);
  std::vector<double> de, dvrho, dvsigma;
  t.parameter_derivatives(pts, p, de, dvrho, dvsigma);
  const double w = xc.weight(term);
  for (std::size_t i = 0; i < pts.np; ++i) out.energy += w * map.weight[i] * de[i];
  if (!t.needs_gradient()) dvsigma.assign(pts.np * (ns == 1 ? 1 : 3), 0.0);
  out.potential = assemble_potential(mesh, map, grad, ns, gradient, dvrho, dvsigma);
  for (auto& v : out.potential) v *= w;
  return out;
}

}  // namespace stillpoint

namespace stillpoint {

RippleStability ripple_stability(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& n,
                                 double thr) {
  RippleStability out;
  if (xc.empty() || !xc.needs_gradient()) return out;
  const int ns = static_cast<int>(n.size());
  XcPointData pts;
  std::vector<double> grad;
  const PointMap map = gather(mesh, n, true, thr, pts, grad);
  XcDerivatives d;
  xc.evaluate(pts, 2, d);
  double ng[4], gg[4];
  double lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (std::size_t i = 0; i < pts.np; ++i) {
    gradient_blocks(d, grad, i, ns, ng, gg);
    // Scaled by the von Weizsaecker stiffness 1/(4 n_s) of each spin: M = S e_gg S with
    // S = diag(sqrt(4 n_s)); the sum 1 + M must stay positive definite.
    double lambda;
    if (ns == 1) {
      lambda = 4.0 * pts.rho[i] * gg[0];
    } else {
      const double su = std::sqrt(4.0 * pts.rho[2 * i]), sd = std::sqrt(4.0 * pts.rho[2 * i + 1]);
      const double a = su * su * gg[0], b = su * sd * gg[1], c = sd * sd * gg[3];
      lambda = 0.5 * (a + c) - std::sqrt(0.25 * (a - c) * (a - c) + b * b);
    }
    if (!std::isfinite(lambda)) continue;  // the SCF's own non-finite checks name such points
    const double x = mesh.x()(map.node[i]);
    if (lambda < -1.0) {
      lo = std::min(lo, x);
      hi = std::max(hi, x);
      ++out.unstable_points;
    }
    if (lambda < out.worst) {
      out.worst = lambda;
      out.x = x;
      double tot = 0.0, g = 0.0;
      for (int s = 0; s < ns; ++s) tot += pts.rho[ns * i + s], g += grad[ns * i + s];
      out.density = tot;
      out.gradient = std::abs(g);
    }
  }
  if (out.unstable_points > 0) out.from = lo, out.to = hi;
  return out;
}

}  // namespace stillpoint
