// Checks against results known outside stillpoint: closed-form eigenvalues and integrals, and
// published (or independently computed) values for model systems. Hartree atomic units.
//
// Sources are named beside each check. "check-values §x" is
// basis-data/reference/check-values.md, with the confidence label given there.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <numbers>
#include <string>
#include <vector>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/numerics/hartree.hpp"
#include "stillpoint/numerics/kinetic.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/ks/system.hpp"
#include "stillpoint/xc/functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace sp = stillpoint;

namespace {

constexpr double kPi = std::numbers::pi;

sp::ScfOptions tight_scf() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-10;
  // Not tighter: the total energy itself fluctuates by ~1e-12 relative between converged
  // iterations (rounding), so a tighter energy criterion only adds iterations.
  o.energy_tolerance = 1e-10;
  o.eigenvalue_tolerance = 1e-10;
  o.max_iterations = 300;
  return o;
}

// The hydrogen-like 1s density (Z^3/pi) exp(-2 Z r) at every node of a radial mesh.
Eigen::VectorXd hydrogenic_1s_density(const sp::Mesh& mesh, double Z) {
  Eigen::VectorXd n(mesh.num_nodes());
  for (int k = 0; k < mesh.num_nodes(); ++k) n(k) = Z * Z * Z / kPi * std::exp(-2.0 * Z * mesh.x()(k));
  return n;
}

sp::SystemSpec atom_spec(int Z, const std::string& configuration, std::vector<std::string> xc, bool polarized,
                         const std::string& grid = "default") {
  sp::SystemSpec s;
  s.name = sp::element_symbol(Z);
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = Z;
  s.atom.configuration = sp::parse_configuration(configuration);
  s.charge = Z - sp::electron_count(s.atom.configuration);
  s.spin_polarized = polarized;
  s.xc = std::move(xc);
  s.grid = sp::grid_preset(sp::Geometry::Radial, grid);
  s.grid_name = grid;
  return s;
}

// One soft-Coulomb nucleus at the origin on the default line grid.
sp::SystemSpec line_atom_spec(double Z, double a, double electrons, bool interacting, std::vector<std::string> xc,
                              bool polarized, const std::string& grid = "default") {
  sp::SystemSpec s;
  s.geometry = sp::Geometry::Line;
  s.line.nuclei = {sp::Nucleus1d{Z, 0.0, a}};
  s.line.interacting = interacting;
  s.line.electron_softening = 1.0;
  s.charge = Z - electrons;
  s.spin_polarized = polarized;
  s.xc = std::move(xc);
  s.grid = sp::grid_preset(sp::Geometry::Line, grid);
  s.grid_name = grid;
  return s;
}

double level_energy(const sp::KsSolution& S, const std::string& label, int spin = 0) {
  for (const auto& lv : S.levels)
    if (lv.label == label && lv.spin == spin) return lv.energy;
  ADD_FAILURE() << "no level " << label << " spin " << spin;
  return std::nan("");
}

// Highest occupied level.
double homo(const sp::KsSolution& S) {
  double e = -1e300;
  for (const auto& lv : S.levels)
    if (lv.occupation > 0.0) e = std::max(e, lv.energy);
  return e;
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// Hydrogen-like ions: E_nl = -Z^2 / (2 n^2), independent of l.
// Source: textbook (Bethe & Salpeter; Griffiths), check-values §4a.
// Bare Coulomb, no Hartree or XC, so the low-level pieces are used (KsProblem always adds
// Hartree for atoms).
TEST(AnalyticChecks, HydrogenLikeEigenvaluesOnDefaultRadialGrid) {
  const sp::MeshSpec spec = sp::grid_preset(sp::Geometry::Radial, "default");
  for (double Z : {1.0, 3.0, 10.0, 54.0}) {
    const sp::Mesh mesh = sp::Mesh::radial(spec, Z);
    const int nu = mesh.num_unknowns();
    Eigen::VectorXd v(nu);
    for (int i = 0; i < nu; ++i) v(i) = -Z / mesh.x()(i + mesh.first_unknown());
    for (int l = 0; l <= 2; ++l) {
      // States that fit in r_max = 80 bohr: for H, n = 4 (<r> = 24 bohr for 4s) already feels
      // the Dirichlet wall at r_max (+1.2e-9 Ha for 4s, gone with r_max = 120); for Z >= 3 the
      // n = 5 shell (<r> ~ 37/Z bohr) is unaffected.
      const int nmax = Z == 1.0 ? 3 : 5;
      const int count = nmax - l + (Z == 1.0 ? 1 : 0);  // for H one more state, the wall-shifted n = 4
      sp::LowestEigensolver solver(sp::scaled_kinetic(mesh, l));
      sp::EigenWarmStart warm;
      warm.lower_bound = -0.5 * Z * Z - 1.0;
      const sp::Eigenpairs ep = solver.solve(v, count, warm);
      ASSERT_EQ(ep.values.size(), count);
      for (int i = 0; i < count; ++i) {
        const int n = l + 1 + i;
        const double exact = -Z * Z / (2.0 * n * n);
        if (n > nmax) {
          // In the continuous problem the wall can only raise a level (a Dirichlet condition
          // restricts the trial space); the shift is tiny at n = 4.
          EXPECT_GT(ep.values(i), exact - 1e-12) << "Z = " << Z << " n = " << n << " l = " << l;
          EXPECT_LT(ep.values(i), exact + 2e-9) << "Z = " << Z << " n = " << n << " l = " << l;
          continue;
        }
        // 1e-10 absolute even for Z = 54 (|E_1s| = 1458 Ha, i.e. 7e-14 relative, close to the
        // Lanczos tolerance 1e-13). Measured: at most 2.4e-11 absolute (Z = 54, 2p).
        EXPECT_NEAR(ep.values(i), exact, 1e-10) << "Z = " << Z << " n = " << n << " l = " << l;
      }
    }
  }
}

// ---------------------------------------------------------------------------------------------
// 1D harmonic oscillator, -1/2 d^2/dx^2 + omega^2 x^2 / 2: E_n = omega (n + 1/2). Textbook.
TEST(AnalyticChecks, HarmonicOscillatorLine) {
  for (double omega : {1.0, 0.5}) {
    for (bool polarized : {false, true}) {
      sp::SystemSpec s;
      s.geometry = sp::Geometry::Line;
      sp::ExternalTerm t;
      t.kind = sp::ExternalTerm::Kind::Harmonic;
      t.omega = omega;
      s.line.potentials = {t};
      s.line.interacting = false;
      const int N = 5;
      s.charge = -N;  // no nuclei: N electrons
      s.spin_polarized = polarized;
      s.unoccupied_levels = 2;  // states n = 0..4 (up to 4.5 omega), resolved to < 5e-11 by the default line grid
      s.grid = sp::grid_preset(sp::Geometry::Line, "default");
      const sp::KsProblem P(s);
      const sp::KsSolution S = sp::solve_scf(P, tight_scf());
      // Every computed level of every channel.
      for (const auto& lv : S.levels)
        EXPECT_NEAR(lv.energy, omega * (lv.index + 0.5), 1e-10)
            << "omega " << omega << " state " << lv.index << " spin " << lv.spin;
      // N non-interacting electrons by aufbau: unpolarized 2+2+1 in n = 0,1,2; polarized 3 up
      // (n = 0,1,2) and 2 down (n = 0,1).
      const double exact = polarized ? omega * (0.5 + 1.5 + 2.5 + 0.5 + 1.5) : omega * (2 * 0.5 + 2 * 1.5 + 2.5);
      EXPECT_NEAR(S.energy.total, exact, 1e-10) << "omega " << omega << (polarized ? " polarized" : "");
      // Virial theorem for the harmonic oscillator: T = V = E/2 (textbook).
      EXPECT_NEAR(S.energy.kinetic, 0.5 * exact, 1e-9);
      EXPECT_NEAR(S.energy.external, 0.5 * exact, 1e-9);
      EXPECT_EQ(S.energy.hartree, 0.0);
      EXPECT_EQ(S.energy.xc, 0.0);
    }
  }
}

// ---------------------------------------------------------------------------------------------
// Hartree energy and potential of the hydrogen-like 1s density n = (Z^3/pi) exp(-2 Z r):
// E_H = 5Z/16 and v_H(r) = [1 - (1 + Z r) exp(-2 Z r)] / r.
// Source: textbook integral (same as the He first-order term <1/r12> = 5Z/8), check-values §4b
// [recalled+computed].
TEST(AnalyticChecks, HartreeOfHydrogenic1sDensity) {
  const sp::MeshSpec spec = sp::grid_preset(sp::Geometry::Radial, "default");
  for (double Z : {1.0, 2.0, 10.0}) {
    const sp::Mesh mesh = sp::Mesh::radial(spec, Z);
    const Eigen::VectorXd n = hydrogenic_1s_density(mesh, Z);
    EXPECT_NEAR(mesh.density_weight().dot(n), 1.0, 1e-12) << "Z = " << Z;
    const sp::Hartree H(mesh, 0.0);
    const Eigen::VectorXd v = H.potential(n);
    EXPECT_NEAR(H.energy(n, v), 5.0 * Z / 16.0, 1e-10) << "Z = " << Z;
    double max_dev = 0.0;
    for (int k = 1; k < mesh.num_nodes(); ++k) {
      const double r = mesh.x()(k), x = Z * r;
      // 1 - (1 + x) e^{-2x} = -expm1(-2x) - x e^{-2x}, without cancellation at small x.
      const double exact = (-std::expm1(-2.0 * x) - x * std::exp(-2.0 * x)) / r;
      max_dev = std::max(max_dev, std::abs(v(k) - exact) / Z);
      EXPECT_NEAR(v(k), exact, 1e-10 * Z) << "Z = " << Z << " r = " << r;
    }
    // r = 0: the limit v_H(0) = Z.
    EXPECT_NEAR(v(0), Z, 1e-8 * Z) << "Z = " << Z;
    std::printf("[ hartree ] Z = %4.1f: E_H - 5Z/16 = %.2e, max |v_H - exact| / Z = %.2e, v_H(0)/Z - 1 = %.2e\n", Z,
                H.energy(n, v) - 5.0 * Z / 16.0, max_dev, v(0) / Z - 1.0);
  }
}

// ---------------------------------------------------------------------------------------------
// Slater (LDA) exchange of the exact 1s density. Closed forms from check-values §4c [computed,
// closed form and quadrature agree]: integral of n^{4/3} = (27/64) Z pi^{-1/3}, so
//   unpolarized:        E_x = -(81/256) 3^{1/3} pi^{-2/3} Z   (= -0.21274150 Z)
//   fully polarized:    E_x = -(81/256) 6^{1/3} pi^{-2/3} Z   (= -0.26803750 Z).
TEST(AnalyticChecks, LdaExchangeOfHydrogenic1sDensity) {
  const sp::MeshSpec spec = sp::grid_preset(sp::Geometry::Radial, "default");
  sp::XcSettings xs;
  const sp::XcFunctional lda_x = sp::make_functional({"lda_x"}, xs);
  const double unpol = -(81.0 / 256.0) * std::cbrt(3.0) * std::pow(kPi, -2.0 / 3.0);
  const double pol = -(81.0 / 256.0) * std::cbrt(6.0) * std::pow(kPi, -2.0 / 3.0);
  EXPECT_NEAR(unpol, -0.21274150, 5e-9);  // the rounded values printed in check-values §4c
  EXPECT_NEAR(pol, -0.26803750, 5e-9);
  for (double Z : {1.0, 2.0, 10.0}) {
    const sp::Mesh mesh = sp::Mesh::radial(spec, Z);
    const Eigen::VectorXd n = hydrogenic_1s_density(mesh, Z);
    const Eigen::VectorXd zero = Eigen::VectorXd::Zero(mesh.num_nodes());
    const double e_unpol = sp::evaluate_xc(mesh, lda_x, {n}, 1e-30).energy;
    const double e_pol = sp::evaluate_xc(mesh, lda_x, {n, zero}, 1e-30).energy;
    EXPECT_NEAR(e_unpol, unpol * Z, 1e-9) << "Z = " << Z;
    EXPECT_NEAR(e_pol, pol * Z, 1e-9) << "Z = " << Z;
    // The other spin assignment gives the same energy.
    EXPECT_NEAR(sp::evaluate_xc(mesh, lda_x, {zero, n}, 1e-30).energy, pol * Z, 1e-9) << "Z = " << Z;
    EXPECT_NEAR(sp::xc_energy(mesh, lda_x, {n}, 1e-30), e_unpol, 1e-13);
  }
}

// GGA exchange and LDA correlation of the exact hydrogen 1s density, by the program's own mesh
// quadrature and libxc, against values computed independently (check-values §4c,
// [computed]: a separate quadrature of the same functional forms). B88 on this density is also
// in A. D. Becke, PRA 38, 3098 (1988), Table I: -0.3098 [recalled].
TEST(AnalyticChecks, GgaAndCorrelationOfHydrogen1sDensity) {
  const sp::MeshSpec spec = sp::grid_preset(sp::Geometry::Radial, "default");
  const sp::Mesh mesh = sp::Mesh::radial(spec, 1.0);
  const Eigen::VectorXd n = hydrogenic_1s_density(mesh, 1.0);
  const Eigen::VectorXd zero = Eigen::VectorXd::Zero(mesh.num_nodes());
  struct Case {
    const char* name;
    bool polarized;
    double value;
  };
  sp::XcSettings xs;
  for (const Case& c : {Case{"gga_x_b88", true, -0.309756}, Case{"gga_x_pbe", true, -0.3059406},
                        Case{"lda_c_pw", true, -0.0221840}, Case{"lda_c_vwn", true, -0.0221422},
                        Case{"lda_c_pz", true, -0.0223272}, Case{"gga_x_pbe", false, -0.2539957},
                        Case{"lda_c_pw", false, -0.0413915}, Case{"lda_c_vwn", false, -0.0414115},
                        Case{"lda_c_pz", false, -0.0416192}}) {
    const sp::XcFunctional f = sp::make_functional({c.name}, xs);
    const double e = c.polarized ? sp::evaluate_xc(mesh, f, {n, zero}, 1e-30).energy
                                 : sp::evaluate_xc(mesh, f, {n}, 1e-30).energy;
    // The references carry 6-7 digits: agreement to the last printed digit.
    EXPECT_NEAR(e, c.value, 1e-6) << c.name << (c.polarized ? " polarized" : " unpolarized");
  }
}

// ---------------------------------------------------------------------------------------------
// Exchange-only LDA: for a Coulomb system whose exchange scales as E_x[n_lambda] = lambda E_x[n],
// the self-consistent solution obeys the virial theorem 2 T_s + V = 0, i.e. E = -T_s.
// Source: uniform-scaling argument (Levy & Perdew, PRA 32, 2010 (1985) [memory]; Parr & Yang,
// "Density-Functional Theory of Atoms and Molecules" (1989)); check-values §4d.
// He and Ne totals and He 1s eigenvalue: check-values §4d/§4f [recalled+computed].
TEST(AnalyticChecks, ExchangeOnlyLdaVirialAndTotals) {
  struct Case {
    int Z;
    const char* config;
    bool polarized;
    double energy;  // NaN: only the virial is checked
    double eps_1s;
  };
  const double none = std::nan("");
  const Case cases[] = {
      {2, "1s2", false, -2.7236398, -0.516968},       // check-values §4f [recalled+computed]
      {10, "1s2 2s2 2p6", false, -127.490741, none},  // check-values §4f [recalled+computed]
      {7, "1s2 2s2 2p3", true, none, none},           // open shell, spin-polarized: virial only
  };
  for (const Case& c : cases) {
    const sp::KsProblem P(atom_spec(c.Z, c.config, {"lda_x"}, c.polarized));
    const sp::KsSolution S = sp::solve_scf(P, tight_scf());
    const auto& E = S.energy;
    std::printf("[ x-only ] Z = %2d: E = %.10f  T_s = %.10f  E + T_s = %.2e  -V/T = %.12f\n", c.Z, E.total, E.kinetic,
                E.total + E.kinetic, -(E.external + E.hartree + E.xc) / E.kinetic);
    EXPECT_NEAR(E.total, -E.kinetic, 1e-7) << "virial, Z = " << c.Z;
    if (!std::isnan(c.energy)) {
      EXPECT_NEAR(E.total, c.energy, 1e-6) << "Z = " << c.Z;
    }
    if (!std::isnan(c.eps_1s)) {
      EXPECT_NEAR(level_energy(S, "1s"), c.eps_1s, 1e-6) << "Z = " << c.Z;
    }
  }
}

// Spin-polarized GGA atoms with the default SCF options. Exchange-only GGA exchange scales
// like LDA exchange under uniform scaling (E_x[n_λ] = λ E_x[n] for any functional of the
// reduced gradient form), so the exchange-only virial E = −T_s of check-values §4d holds for
// it too (textbook scaling argument, Levy & Perdew 1985 [memory]). With PBE correlation the
// check is that the SCF converges at all: the minority-spin potential where only the majority
// density lives is noise that no electron feels (it once stalled these SCFs at 1e-7 Ha).
TEST(AnalyticChecks, SpinPolarizedGgaAtomsConvergeWithDefaults) {
  struct Case {
    int Z;
    const char* config;
  };
  for (const Case& c : {Case{3, "1s2 2s1"}, Case{7, "1s2 2s2 2p3"}, Case{8, "1s2 2s2 2p4"}}) {
    {
      const sp::KsProblem P(atom_spec(c.Z, c.config, {"gga_x_pbe"}, true));
      const sp::KsSolution S = sp::solve_scf(P, tight_scf());
      EXPECT_NEAR(S.energy.total, -S.energy.kinetic, 1e-7) << "exchange-only GGA virial, Z = " << c.Z;
    }
    const sp::KsProblem P(atom_spec(c.Z, c.config, {"gga_x_pbe", "gga_c_pbe"}, true));
    const sp::KsSolution S = sp::solve_scf(P, sp::ScfOptions{});
    EXPECT_LT(S.iterations, 40) << "Z = " << c.Z;
    const sp::KsSolution T = sp::solve_scf(P, tight_scf(), &S);
    EXPECT_NEAR(S.energy.total, T.energy.total, 1e-8) << "default SCF tolerances reach the tight energy, Z = " << c.Z;
    // Li PBE total energy -7.4622 hartree [memory; spherical Li has no averaging ambiguity].
    if (c.Z == 3) {
      EXPECT_NEAR(S.energy.total, -7.4622, 2e-4);
    }
  }
}

// ---------------------------------------------------------------------------------------------
// One electron in the 1D soft-Coulomb potential -Z / sqrt(x^2 + a^2): a non-interacting line
// system with one nucleus. Values: check-values §1.
TEST(AnalyticChecks, SoftCoulombHydrogen1d) {
  struct Case {
    double Z, a;
    double e[3];
    const char* source;
  };
  const double none = std::nan("");
  const Case cases[] = {
      // a = 1: E0, E1 [recalled+computed] (Javanainen, Eberly, Su, PRA 38, 3430 (1988) quote
      // -0.67 and -0.27), E2 [recalled+computed].
      {1.0, 1.0, {-0.66977714, -0.27489135, -0.15145467}, "check-values §1, a = 1"},
      // a = sqrt(2): E0 = -1/2 exactly (psi = (1 + s) e^{-s}, s = sqrt(x^2 + 2)); E1 [computed].
      {1.0, std::sqrt(2.0), {-0.5, -0.23290334, none}, "check-values §1, a = sqrt(2)"},
      // Z = 2, a = 1 ("1D He+"): [computed].
      {2.0, 1.0, {-1.48343598, none, none}, "check-values §1, Z = 2"},
  };
  for (const Case& c : cases) {
    const sp::KsProblem P(line_atom_spec(c.Z, c.a, 1.0, false, {}, false));
    const sp::KsSolution S = sp::solve_scf(P, tight_scf());
    for (int i = 0; i < 3; ++i) {
      if (std::isnan(c.e[i])) continue;
      EXPECT_NEAR(level_energy(S, std::to_string(i + 1)), c.e[i], 1e-7) << c.source << ", state " << i;
    }
    EXPECT_NEAR(S.energy.total, c.e[0], 1e-7) << c.source;
    std::printf("[ 1D H ] Z = %.0f a = %.6f: E0 = %.10f E1 = %.10f E2 = %.10f\n", c.Z, c.a, level_energy(S, "1"),
                level_energy(S, "2"), level_energy(S, "3"));
  }
}

// The exact a = sqrt(2) ground state: E0 = -1/2 and psi proportional to (1 + s) e^{-s},
// s = sqrt(x^2 + 2). Derived in check-values §1 (-psi''/(2 psi) = -1/2 + 1/s).
TEST(AnalyticChecks, SoftCoulombHydrogenExactGroundState) {
  const sp::KsProblem P(line_atom_spec(1.0, std::sqrt(2.0), 1.0, false, {}, false));
  const sp::KsSolution S = sp::solve_scf(P, tight_scf());
  EXPECT_NEAR(level_energy(S, "1"), -0.5, 1e-9);
  const sp::Mesh& m = P.mesh();
  Eigen::VectorXd psi(m.num_nodes());
  for (int k = 0; k < m.num_nodes(); ++k) {
    const double s = std::sqrt(m.x()(k) * m.x()(k) + 2.0);
    psi(k) = (1.0 + s) * std::exp(-s);
  }
  psi /= std::sqrt(m.w().dot(psi.cwiseProduct(psi)));
  const Eigen::VectorXd u = S.states[0].orbitals.col(0);
  const double sign = u.dot(psi) < 0 ? -1.0 : 1.0;
  const double dev = (sign * u - psi).cwiseAbs().maxCoeff();
  std::printf("[ 1D H a=sqrt2 ] max |psi - exact| = %.2e (max psi %.3f)\n", dev, psi.maxCoeff());
  EXPECT_LT(dev, 1e-8);
  // The density of one electron integrates to one.
  EXPECT_NEAR(m.density_weight().dot(S.total_density()), 1.0, 1e-12);
}

// ---------------------------------------------------------------------------------------------
// 1D He (Z = 2, softening 1 for e-n and e-e) in the 1D LDA: exact soft-Coulomb uniform-gas
// exchange (lda_x_1d_soft) + CSC correlation with the Helbig et al. (PRA 83, 032503 (2011))
// parameters (lda_c_1d_csc). Values: check-values §2 [computed, regression: grid converged to
// 1e-8 by the author of check-values, no published table read].
TEST(AnalyticChecks, OneDimensionalHeliumLda) {
  {
    const sp::KsProblem P(line_atom_spec(2.0, 1.0, 2.0, true, {"lda_x_1d_soft", "lda_c_1d_csc"}, false));
    const sp::KsSolution S = sp::solve_scf(P, tight_scf());
    std::printf("[ 1D He LDA ] E = %.10f  HOMO = %.10f  T_s = %.8f E_ext = %.8f E_H = %.8f E_xc = %.8f\n",
                S.energy.total, homo(S), S.energy.kinetic, S.energy.external, S.energy.hartree, S.energy.xc);
    EXPECT_NEAR(S.energy.total, -2.20137556, 1e-6);  // check-values §2 [computed]
    // Energy parts, check-values §2 table [computed], printed to 6 decimals.
    EXPECT_NEAR(S.energy.kinetic, 0.261988, 2e-6);
    EXPECT_NEAR(S.energy.external, -3.194749, 2e-6);
    EXPECT_NEAR(S.energy.hartree, 1.421176, 2e-6);
    EXPECT_NEAR(S.energy.xc, -0.689790, 2e-6);
    // HOMO: check-values §2 (correction paragraph) gives -0.47769567 from an independent solver
    // converged to ~1e-12; the table's -0.477692 is 2-4e-6 off there. The other 1D LDA HOMOs of
    // that section are good to 5e-6 only, so they are checked to 5e-6.
    EXPECT_NEAR(homo(S), -0.47769567, 1e-7);
  }
  {
    const sp::KsProblem P(line_atom_spec(2.0, 1.0, 2.0, true, {"lda_x_1d_soft"}, false));
    const sp::KsSolution S = sp::solve_scf(P, tight_scf());
    std::printf("[ 1D He x-only ] E = %.10f  HOMO = %.10f\n", S.energy.total, homo(S));
    EXPECT_NEAR(S.energy.total, -2.15818964, 1e-6);  // check-values §2 [computed]
    EXPECT_NEAR(homo(S), -0.467343, 5e-6);           // check-values §2 [computed], see the HOMO note above
  }
}

// Janak's theorem for the discrete functional: the HOMO equals dE/df of its occupation f
// (J. F. Janak, PRB 18, 7165 (1978) [memory]). Here from a one-sided three-point difference at
// the integer occupation (f cannot exceed the channel capacity), for the three 1D LDA systems of
// check-values §2. It shows that the reported HOMO is the exact derivative of the reported
// total energy, independently of any reference HOMO.
TEST(AnalyticChecks, JanakHomoEqualsEnergySlope) {
  struct Case {
    const char* name;
    double Z;
    double f;  // occupation of the HOMO
    bool polarized;
    std::vector<std::string> xc;
  };
  const Case cases[] = {
      {"1D He LDA", 2.0, 2.0, false, {"lda_x_1d_soft", "lda_c_1d_csc"}},
      {"1D He x-only", 2.0, 2.0, false, {"lda_x_1d_soft"}},
      {"1D H LSD", 1.0, 1.0, true, {"lda_x_1d_soft", "lda_c_1d_csc"}},
  };
  const double d = 1e-3;
  for (const Case& c : cases) {
    double E[3], eps = 0.0;
    for (int j = 0; j < 3; ++j) {
      const double f = c.f - j * d;
      sp::SystemSpec s = line_atom_spec(c.Z, 1.0, f, true, c.xc, c.polarized);
      if (c.polarized)
        s.occupations = {{f}, {}};
      else
        s.occupations = {{f}};
      const sp::KsProblem P(s);
      const sp::KsSolution S = sp::solve_scf(P, tight_scf());
      E[j] = S.energy.total;
      if (j == 0) eps = homo(S);
    }
    // Truncation error of the one-sided formula: (d^2/3) |E'''|, about 1e-7 here.
    const double dEdf = (3.0 * E[0] - 4.0 * E[1] + E[2]) / (2.0 * d);
    std::printf("[ Janak ] %-13s dE/df = %.10f  HOMO = %.10f  diff = %.2e\n", c.name, dEdf, eps, dEdf - eps);
    EXPECT_NEAR(dEdf, eps, 1e-6) << c.name;
  }
}

// ---------------------------------------------------------------------------------------------
// 1D H atom (Z = 1, a = 1), one fully spin-polarized electron, local spin density.
// Values: check-values §2 [computed].
TEST(AnalyticChecks, OneDimensionalHydrogenLsd) {
  {
    const sp::KsProblem P(line_atom_spec(1.0, 1.0, 1.0, true, {"lda_x_1d_soft"}, true));
    const sp::KsSolution S = sp::solve_scf(P, tight_scf());
    std::printf("[ 1D H LSD x ] E = %.10f  HOMO = %.10f\n", S.energy.total, homo(S));
    EXPECT_NEAR(S.energy.total, -0.639373, 1e-6);
  }
  {
    const sp::KsProblem P(line_atom_spec(1.0, 1.0, 1.0, true, {"lda_x_1d_soft", "lda_c_1d_csc"}, true));
    const sp::KsSolution S = sp::solve_scf(P, tight_scf());
    std::printf("[ 1D H LSD xc ] E = %.10f  HOMO = %.10f\n", S.energy.total, homo(S));
    EXPECT_NEAR(S.energy.total, -0.646594, 1e-6);
    // check-values §2 [computed]: -0.413183; ours is -0.4131854001 on every grid tried (see the
    // HOMO note in OneDimensionalHeliumLda), hence 5e-6.
    EXPECT_NEAR(homo(S), -0.413183, 5e-6);
    EXPECT_NEAR(level_energy(S, "1", 0), homo(S), 0.0);  // the electron is in the spin-up channel
  }
}
