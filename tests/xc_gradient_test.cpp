// The discrete exchange-correlation potential is the exact gradient of the discrete energy:
//   v_{s,k} = (dE_xc / dn_{s,k}) / W_k,
// checked against central finite differences of xc_energy (design: docs/theory.md §2,
// §7 and §10, "the discrete v_xc equals the finite-difference gradient of the discrete E_xc").
// This covers the weak-form GGA potential (the D^T term) and the radial first element, whose
// density derivative ignores the weightless r = 0 node.
//
// Finite differences: a sixth-order central stencil with h = 1e-3 n_{s,k}, reduced for GGAs
// where the step would change a density gradient too much (fd_step). E_xc is a sum over element
// quadrature points, and a point depends only on the nodes of its own element; so the difference
// E(n + h e_k) - E(n - h e_k) is unchanged if the density is set to zero outside the element(s)
// that contain node k. The main checks use such a localized density, which removes the
// cancellation error of subtracting two totals of order 10 Ha: in the tails, where h W_k v_k is
// tiny, that error is large (measured with the full density: 1e-2 relative at r = 8 bohr in Ne,
// n ~ 6e-9, and in the 1D He tail at |x| = 9..12). Separate checks use the full density at nodes
// where that cancellation is harmless, so the localization itself is also tested.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <numbers>
#include <set>
#include <string>
#include <vector>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/ks/system.hpp"
#include "stillpoint/xc/functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace sp = stillpoint;

namespace {

constexpr double kPi = std::numbers::pi;
constexpr double kThreshold = 1e-30;  // the library default (XcSettings, KsProblem)
constexpr double kRelTol = 1e-6;
// GGA step limit, as a fraction of the gradient scale (fd_step). Measured: 1e-3 leaves
// minority-spin tail nodes at the rounding limit (up to 6e-6 relative at n ~ 5e-14); with 3e-2
// the largest deviation over all checks here is 1.0e-7 (truncation and rounding balanced).
constexpr double kGradientStep = 3e-2;
// Nodes are checked only where every spin density exceeds this. Below it libxc's own energy and
// potential stop being consistent with each other (pointwise, measured with libxc alone): PW92
// correlation e vs vrho differ by 1e-5 relative at n = 1e-14 and 5e-3 at 1e-18; B88 exchange
// stops depending on sigma at reduced gradients s ~ 1e7 (n ~ 4e-21 in the Ne tail) while vsigma
// stays finite; PBE correlation is off by 16% at n = 1e-10 (but is negligible there next to
// exchange). Such points are far outside anything an SCF cares about.
constexpr double kMinDensity = 1e-12;

using Densities = std::vector<Eigen::VectorXd>;

// Nodes of the element(s) containing node k.
std::vector<int> support(const sp::Mesh& m, int k) {
  const int p = m.degree();
  std::set<int> elems;
  if (k % p == 0) {
    if (k / p - 1 >= 0) elems.insert(k / p - 1);
    if (k / p < m.num_elements()) elems.insert(k / p);
  } else {
    elems.insert(k / p);
  }
  std::vector<int> nodes;
  for (int e : elems)
    for (int a = 0; a <= p; ++a) nodes.push_back(m.node(e, a));
  return nodes;
}

Densities localized(const sp::Mesh& m, const Densities& n, int k) {
  Densities out(n.size(), Eigen::VectorXd::Zero(m.num_nodes()));
  for (int j : support(m, k))
    for (std::size_t s = 0; s < n.size(); ++s) out[s](j) = n[s](j);
  return out;
}

// Step for node k of spin s. Relative to the density, h = 1e-3 n_k. For a GGA the step must
// also be small against the gradients it changes: g_q = sum_a D(q, a) n_a moves by h D(q, k),
// and next to an element end, where GLL nodes cluster, |D| ~ p^2 / (element length), so a step
// of 1e-3 n_k can change g_q by tens of percent (measured with a fourth-order stencil: the
// truncation error then reaches 1e-3 relative at element boundaries, while the difference
// converges to v as h -> 0). So h is also limited by kGradientStep max(|g_q|, n_q^{4/3}) /
// |D(q, k)| at every point q of the support (n^{4/3} is the scale of |g| in the reduced gradient
// s of a GGA).
double fd_step(const sp::Mesh& m, const sp::XcFunctional& xc, const Densities& n, int s, int k) {
  double h = 1e-3 * n[s](k);
  if (!xc.needs_gradient()) return h;
  const int p = m.degree();
  for (int e = 0; e < m.num_elements(); ++e) {
    if (k < m.node(e, 0) || k > m.node(e, p)) continue;
    const int a = k - m.node(e, 0);
    const Eigen::MatrixXd& D = m.density_derivative(e);
    for (int q = 0; q <= p; ++q) {
      if (D(q, a) == 0.0) continue;
      double g = 0.0;
      for (int b = 0; b <= p; ++b) g += D(q, b) * n[s](m.node(e, b));
      const double nq = std::max(n[s](m.node(e, q)), 0.0);
      const double scale = std::max(std::abs(g), std::pow(nq, 4.0 / 3.0));
      if (scale > 0.0) h = std::min(h, kGradientStep * scale / std::abs(D(q, a)));
    }
  }
  return h;
}

// (dE/dn_{s,k}) / W_k by the sixth-order central difference with step h.
double fd_potential(const sp::Mesh& m, const sp::XcFunctional& xc, Densities n, int s, int k, double h) {
  const double n0 = n[s](k);
  auto E = [&](double dn) {
    n[s](k) = n0 + dn;
    return sp::xc_energy(m, xc, n, kThreshold);
  };
  const double d = (45.0 * (E(h) - E(-h)) - 9.0 * (E(2 * h) - E(-2 * h)) + (E(3 * h) - E(-3 * h))) / (60.0 * h);
  return d / m.density_weight()(k);
}

struct Stats {
  int checked = 0;
  double max_rel = 0.0;
  double min_step = 1.0;  // smallest h / n_k used
};

// Compares the library potential with finite differences at the nodes `ks` (each spin).
void check_nodes(const sp::Mesh& m, const sp::XcFunctional& xc, const Densities& n, const std::vector<int>& ks,
                 bool localize, const std::string& what, Stats& st) {
  const sp::XcOnMesh ref = sp::evaluate_xc(m, xc, n, kThreshold);
  for (int k : ks) {
    for (std::size_t s = 0; s < n.size(); ++s) {
      double tot = 0.0;
      for (const auto& ns : n) tot += ns(k);
      ASSERT_GT(n[s](k), kMinDensity) << what << ": pick nodes with a density above kMinDensity";
      ASSERT_GT(tot, 1e3 * kThreshold);
      const double h = fd_step(m, xc, n, static_cast<int>(s), k);
      st.min_step = std::min(st.min_step, h / n[s](k));
      const double fd = fd_potential(m, xc, localize ? localized(m, n, k) : n, static_cast<int>(s), k, h);
      const double v = ref.potential[s](k);
      const double rel = std::abs(fd - v) / std::max(std::abs(v), 1e-10);
      st.checked++;
      st.max_rel = std::max(st.max_rel, rel);
      EXPECT_LE(rel, kRelTol) << what << (localize ? " (localized)" : " (full density)") << ": node " << k
                              << " x = " << m.x()(k) << " spin " << s << " n = " << n[s](k) << " v = " << v
                              << " fd = " << fd << " h/n = " << h / n[s](k);
    }
  }
}

int nearest_node(const sp::Mesh& m, double x) {
  int best = 0;
  for (int k = 0; k < m.num_nodes(); ++k)
    if (std::abs(m.x()(k) - x) < std::abs(m.x()(best) - x)) best = k;
  return best;
}

// Nodes near r = 0 (inside and at the end of the first element, and into the second), element
// boundaries and interiors across the atom, and tail nodes (density above kMinDensity).
std::vector<int> radial_nodes(const sp::Mesh& m, const Densities& n) {
  const int p = m.degree();
  std::set<int> ks = {1, 2, p / 2, p - 1, p, p + 1, 2 * p - 1, 2 * p, 2 * p + 1};
  for (double r : {0.05, 0.3, 1.0, 2.5, 5.0, 8.0, 12.0, 18.0}) {
    const int k = nearest_node(m, r);
    ks.insert(k);
    ks.insert(p * ((k + p / 2) / p));  // the nearest element boundary
  }
  std::vector<int> out;
  for (int k : ks) {
    bool ok = k > 0 && k < m.num_nodes() - 1;
    for (const auto& ns : n) ok = ok && ns(k) > kMinDensity;
    if (ok) out.push_back(k);
  }
  return out;
}

std::vector<int> line_nodes(const sp::Mesh& m, const Densities& n) {
  const int p = m.degree();
  std::set<int> ks;
  for (double x : {-9.0, -4.3, -1.0, -0.37, 0.0, 0.12, 0.5, 1.0, 2.71, 6.0, 11.5}) {
    const int k = nearest_node(m, x);
    ks.insert(k);
    ks.insert(p * ((k + p / 2) / p));
    ks.insert(k + 1);
  }
  std::vector<int> out;
  for (int k : ks) {
    bool ok = k > 0 && k < m.num_nodes() - 1;
    for (const auto& ns : n) ok = ok && ns(k) > kMinDensity;
    if (ok) out.push_back(k);
  }
  return out;
}

sp::ScfOptions scf_options() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-10;
  // Not tighter: the total energy itself fluctuates by ~1e-12 relative between converged
  // iterations (rounding), so a tighter energy criterion only adds iterations.
  o.energy_tolerance = 1e-10;
  o.eigenvalue_tolerance = 1e-10;
  return o;
}

sp::SystemSpec atom_spec(int Z, const std::string& config, std::vector<std::string> xc, bool polarized) {
  sp::SystemSpec s;
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = Z;
  s.atom.configuration = sp::parse_configuration(config);
  s.charge = Z - sp::electron_count(s.atom.configuration);
  s.spin_polarized = polarized;
  s.xc = std::move(xc);
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  return s;
}

// Self-consistent densities (LDA), computed once: Ne unpolarized and N spin-polarized.
struct RadialDensities {
  sp::Mesh ne_mesh, n_mesh;
  Densities ne, n_lsd;
};
const RadialDensities& scf_densities() {
  static const RadialDensities d = [] {
    const sp::KsProblem ne(atom_spec(10, "1s2 2s2 2p6", {"lda_x", "lda_c_vwn"}, false));
    const sp::KsProblem n(atom_spec(7, "1s2 2s2 2p3", {"lda_x", "lda_c_vwn"}, true));
    const sp::KsSolution sne = sp::solve_scf(ne, scf_options());
    const sp::KsSolution sn = sp::solve_scf(n, scf_options());
    return RadialDensities{ne.mesh(), n.mesh(), sne.density, sn.density};
  }();
  return d;
}

// A Ne-like analytic density (1s, 2sp and a diffuse tail as exponentials), and a polarized
// pair with different shapes for the two spins.
Densities analytic_radial(const sp::Mesh& m, bool polarized) {
  Densities n(polarized ? 2 : 1, Eigen::VectorXd::Zero(m.num_nodes()));
  for (int k = 0; k < m.num_nodes(); ++k) {
    const double r = m.x()(k);
    const double core = 2.0 * std::pow(9.6, 3) / kPi * std::exp(-2.0 * 9.6 * r);
    const double shell = 8.0 * std::pow(5.7, 5) / (96.0 * kPi) * r * r * std::exp(-5.7 * r);
    const double diffuse = 0.02 * std::exp(-1.3 * r) * (1.0 + r);
    if (!polarized) {
      n[0](k) = core + shell + diffuse;
    } else {
      n[0](k) = 0.5 * core + 0.65 * shell + diffuse;
      n[1](k) = 0.5 * core * std::exp(-0.3 * r) + 0.35 * shell * (1.0 + 0.1 * r) + 0.3 * diffuse * std::exp(-0.2 * r);
    }
  }
  return n;
}

Densities analytic_line(const sp::Mesh& m, bool polarized) {
  Densities n(polarized ? 2 : 1, Eigen::VectorXd::Zero(m.num_nodes()));
  for (int k = 0; k < m.num_nodes(); ++k) {
    const double x = m.x()(k);
    const double a = 0.9 * std::exp(-1.8 * std::sqrt(1.0 + x * x)) * (1.0 + 0.4 * x * x);
    const double b = 0.3 * std::exp(-1.1 * std::sqrt(1.0 + (x - 0.7) * (x - 0.7)));
    if (!polarized) {
      n[0](k) = a + b;
    } else {
      n[0](k) = a + 0.2 * b;
      n[1](k) = 0.6 * a * std::exp(-0.1 * x) + b;
    }
  }
  return n;
}

sp::XcFunctional functional(const std::vector<std::string>& names, bool one_dimensional) {
  sp::XcSettings xs;
  xs.one_dimensional = one_dimensional;
  xs.softening = 1.0;
  xs.density_threshold = kThreshold;
  return sp::make_functional(names, xs);
}

const std::vector<std::vector<std::string>> kRadialFunctionals = {
    {"lda_x", "lda_c_vwn"}, {"lda_x", "lda_c_pw"}, {"gga_x_pbe", "gga_c_pbe"}, {"gga_x_b88"},
    // BLYP; G96 and HCTH/407 carry a tail switch (the potential must stay the exact gradient).
    {"gga_x_b88", "gga_c_lyp"}, {"gga_x_g96"}, {"gga_xc_hcth_407"}};
const std::vector<std::vector<std::string>> kLineFunctionals = {
    {"lda_x_1d_soft", "lda_c_1d_csc"}, {"model:pbe_x", "model:pw92_c"}, {"model:b88_x"}};  // 3D forms as models: libxc refuses them on the line

std::string join(const std::vector<std::string>& v) {
  std::string s;
  for (const auto& x : v) s += (s.empty() ? "" : "+") + x;
  return s;
}

}  // namespace

TEST(XcGradient, RadialScfDensities) {
  const RadialDensities& d = scf_densities();
  for (const auto& names : kRadialFunctionals) {
    const sp::XcFunctional xc = functional(names, false);
    Stats st;
    check_nodes(d.ne_mesh, xc, d.ne, radial_nodes(d.ne_mesh, d.ne), true, "Ne LDA density, " + join(names), st);
    check_nodes(d.n_mesh, xc, d.n_lsd, radial_nodes(d.n_mesh, d.n_lsd), true, "N LSD density, " + join(names), st);
    std::printf("[ radial SCF ] %-22s %3d checks, max rel. deviation %.2e, min h/n %.1e\n", join(names).c_str(),
                st.checked, st.max_rel, st.min_step);
  }
}

TEST(XcGradient, RadialAnalyticDensities) {
  const sp::Mesh m = sp::Mesh::radial(sp::grid_preset(sp::Geometry::Radial, "default"), 10.0);
  for (bool polarized : {false, true}) {
    const Densities n = analytic_radial(m, polarized);
    for (const auto& names : kRadialFunctionals) {
      const sp::XcFunctional xc = functional(names, false);
      Stats st;
      check_nodes(m, xc, n, radial_nodes(m, n), true,
                  std::string(polarized ? "polarized" : "unpolarized") + " analytic, " + join(names), st);
      std::printf("[ radial analytic %s ] %-22s %3d checks, max rel. deviation %.2e, min h/n %.1e\n",
                  polarized ? "pol  " : "unpol", join(names).c_str(), st.checked, st.max_rel, st.min_step);
    }
  }
}

// Without localization: nodes away from r = 0 and from the far tail, where W_k h is large
// enough for the difference of two full totals.
TEST(XcGradient, RadialFullDensityAtMidRangeNodes) {
  const RadialDensities& d = scf_densities();
  auto mid_nodes = [](const sp::Mesh& m) {
    std::vector<int> ks;
    for (double r : {0.3, 0.8, 1.5, 3.0}) ks.push_back(nearest_node(m, r));
    const int p = m.degree();
    ks.push_back(p * ((ks[1] + p / 2) / p));  // an element boundary
    return ks;
  };
  for (const auto& names : kRadialFunctionals) {
    const sp::XcFunctional xc = functional(names, false);
    Stats st;
    check_nodes(d.ne_mesh, xc, d.ne, mid_nodes(d.ne_mesh), false, "Ne LDA density, " + join(names), st);
    check_nodes(d.n_mesh, xc, d.n_lsd, mid_nodes(d.n_mesh), false, "N LSD density, " + join(names), st);
    std::printf("[ radial full ] %-22s %3d checks, max rel. deviation %.2e, min h/n %.1e\n", join(names).c_str(),
                st.checked, st.max_rel, st.min_step);
  }
}

// The r = 0 node has zero weight: the discrete energy does not depend on its density value
// (also through the GGA gradients of the first element), and its potential is reported as 0.
TEST(XcGradient, RadialOriginNodeCarriesNoWeight) {
  const RadialDensities& d = scf_densities();
  for (const auto& names : kRadialFunctionals) {
    const sp::XcFunctional xc = functional(names, false);
    for (const Densities* n : {&d.ne, &d.n_lsd}) {
      const sp::Mesh& m = n == &d.ne ? d.ne_mesh : d.n_mesh;
      EXPECT_EQ(m.density_weight()(0), 0.0);
      const double E0 = sp::xc_energy(m, xc, *n, kThreshold);
      Densities moved = *n;
      for (auto& ns : moved) ns(0) *= 1.7;
      EXPECT_EQ(sp::xc_energy(m, xc, moved, kThreshold), E0) << join(names);
      const sp::XcOnMesh r = sp::evaluate_xc(m, xc, *n, kThreshold);
      for (const auto& v : r.potential) EXPECT_EQ(v(0), 0.0) << join(names);
    }
  }
}

TEST(XcGradient, LineDensities) {
  const sp::Mesh m = sp::Mesh::line(sp::grid_preset(sp::Geometry::Line, "default"));
  // A self-consistent 1D He LDA density as well as analytic ones.
  sp::SystemSpec he;
  he.geometry = sp::Geometry::Line;
  he.line.nuclei = {sp::Nucleus1d{2.0, 0.0, 1.0}};
  he.xc = {"lda_x_1d_soft", "lda_c_1d_csc"};
  he.grid = sp::grid_preset(sp::Geometry::Line, "default");
  const sp::KsProblem P(he);
  const sp::KsSolution S = sp::solve_scf(P, scf_options());
  ASSERT_EQ(P.mesh().num_nodes(), m.num_nodes());
  struct Case {
    std::string name;
    Densities n;
  };
  const Case cases[] = {{"1D He LDA SCF", S.density},
                        {"analytic unpolarized", analytic_line(m, false)},
                        {"analytic polarized", analytic_line(m, true)}};
  for (const Case& c : cases) {
    for (const auto& names : kLineFunctionals) {
      const sp::XcFunctional xc = functional(names, true);
      Stats st;
      check_nodes(m, xc, c.n, line_nodes(m, c.n), true, c.name + ", " + join(names), st);
      // Full density at central nodes (W_k ~ 0.1 there).
      check_nodes(m, xc, c.n, {nearest_node(m, -0.37), nearest_node(m, 0.0), nearest_node(m, 1.0)}, false,
                  c.name + ", " + join(names), st);
      std::printf("[ line %-20s ] %-28s %3d checks, max rel. deviation %.2e, min h/n %.1e\n", c.name.c_str(),
                  join(names).c_str(), st.checked, st.max_rel, st.min_step);
    }
  }
}

// Janak's theorem for a converged radial SCF, dE/df_i = eps_i (J. F. Janak, PRB 18, 7165 (1978)
// [memory]): the total energy is stationary in the orbitals, so its slope in an occupation is the
// eigenvalue. One-sided three-point differences at the integer occupation (f cannot exceed the
// subshell capacity), for a valence (2p) and a core (1s) level, LDA and GGA (which exercises the
// weak-form GGA potential inside the SCF).
TEST(XcGradient, JanakSlopesOfConvergedNeon) {
  const double d = 1e-3;
  for (const auto& names : std::vector<std::vector<std::string>>{{"lda_x", "lda_c_vwn"}, {"gga_x_pbe", "gga_c_pbe"}}) {
    for (const char* level : {"2p", "1s"}) {
      double E[3], eps = 0.0;
      for (int j = 0; j < 3; ++j) {
        const double f2p = level[0] == '2' ? 6.0 - j * d : 6.0;
        const double f1s = level[0] == '1' ? 2.0 - j * d : 2.0;
        sp::SystemSpec s = atom_spec(10, "1s2 2s2 2p6", names, false);
        s.atom.configuration = {{1, 0, f1s}, {2, 0, 2.0}, {2, 1, f2p}};
        s.charge = 10.0 - (f1s + 2.0 + f2p);
        const sp::KsProblem P(s);
        const sp::KsSolution S = sp::solve_scf(P, scf_options());
        E[j] = S.energy.total;
        if (j == 0)
          for (const auto& lv : S.levels)
            if (lv.label == level) eps = lv.energy;
      }
      const double dEdf = (3.0 * E[0] - 4.0 * E[1] + E[2]) / (2.0 * d);
      std::printf("[ Janak Ne %-20s %s ] dE/df = %.9f  eps = %.9f  diff = %.2e\n", join(names).c_str(), level, dEdf,
                  eps, dEdf - eps);
      // Truncation error of the formula: (d^2/3)|E'''|, measured differences 5e-8 (2p) and 9e-8 (1s).
      EXPECT_NEAR(dEdf, eps, 1e-6) << join(names) << " " << level;
    }
  }
}
