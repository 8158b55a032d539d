#include "stillpoint/xc_on_mesh.hpp"

#include <cmath>
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

}  // namespace

XcOnMesh evaluate_xc(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& n,
                     double thr) {
  const int ns = static_cast<int>(n.size());
  const int p = mesh.degree();
  XcOnMesh out;
  out.potential.assign(ns, Eigen::VectorXd::Zero(mesh.num_nodes()));
  if (xc.empty()) return out;
  const bool gradient = xc.needs_gradient();
  XcPointData pts;
  std::vector<double> grad;
  const PointMap map = gather(mesh, n, gradient, thr, pts, grad);
  XcDerivatives d;
  xc.evaluate(pts, 1, d);
  std::vector<Eigen::VectorXd> dE(ns, Eigen::VectorXd::Zero(mesh.num_nodes()));
  for (std::size_t i = 0; i < pts.np; ++i) {
    const double wq = map.weight[i];
    out.energy += wq * d.e[i];
    for (int s = 0; s < ns; ++s) dE[s](map.node[i]) += wq * d.vrho[ns * i + s];
    if (gradient) {
      // dE/dg_s for the gradient g_s = (D n_s)_q, then through D to the element's nodes.
      double dg[2];
      if (ns == 1) {
        dg[0] = 2.0 * d.vsigma[i] * grad[i];
      } else {
        const double g0 = grad[2 * i], g1 = grad[2 * i + 1];
        dg[0] = 2.0 * d.vsigma[3 * i] * g0 + d.vsigma[3 * i + 1] * g1;
        dg[1] = 2.0 * d.vsigma[3 * i + 2] * g1 + d.vsigma[3 * i + 1] * g0;
      }
      const Eigen::MatrixXd& D = mesh.density_derivative(map.element[i]);
      const int q = map.local[i], e = map.element[i];
      for (int s = 0; s < ns; ++s)
        for (int a = 0; a <= p; ++a) dE[s](mesh.node(e, a)) += wq * dg[s] * D(q, a);
    }
  }
  const Eigen::VectorXd& W = mesh.density_weight();
  for (int s = 0; s < ns; ++s)
    for (int k = 0; k < mesh.num_nodes(); ++k) out.potential[s](k) = W(k) > 0.0 ? dE[s](k) / W(k) : 0.0;
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
