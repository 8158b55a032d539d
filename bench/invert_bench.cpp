// Kohn–Sham inversion benchmark: iterations and time to a density error ∫|n − n_t| of 1e-6
// (and, for reference, 1e-8) for a 1D two-electron target and for the neon atom.
// Call invert_report() from the benchmark main; it prints a small table (hartree, bohr).
#include <chrono>
#include <cstdio>
#include <string>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/invert/inversion.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/ks/scf.hpp"

namespace sp = stillpoint;

namespace {

struct Case {
  std::string name;
  sp::SystemSpec system;
  std::vector<Eigen::VectorXd> target;
  sp::InversionOptions options;
};

sp::ScfOptions tight_scf() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-11;
  o.energy_tolerance = 1e-12;
  o.eigenvalue_tolerance = 1e-11;
  return o;
}

// Two electrons on the 1D soft-Coulomb helium (Z = 2, softenings 1) with 1D LDA: the
// interacting form from the reference potential v_ext + v_H[n_t].
Case line_two_electrons() {
  Case c;
  c.name = "1D He, 2 e, LDA target (481 nodes)";
  sp::SystemSpec& s = c.system;
  s.name = "he1d";
  s.geometry = sp::Geometry::Line;
  s.line.nuclei = {{2.0, 0.0, 1.0}};
  s.xc = {"lda_x_1d_soft", "lda_c_1d_csc"};
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  const sp::KsProblem P(s);
  c.target = sp::solve_scf(P, tight_scf()).density;
  c.options.reference_potential = sp::InversionOptions::ReferencePotential::ExternalAndHartree;
  return c;
}

Case neon() {
  Case c;
  c.name = "Ne, 10 e, LDA target (433 nodes)";
  sp::SystemSpec& s = c.system;
  s.name = "Ne";
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = 10;
  s.atom.configuration = sp::parse_configuration("1s2 2s2 2p6");
  s.xc = {"lda_x", "lda_c_vwn"};
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  const sp::KsProblem P(s);
  const sp::KsSolution sol = sp::solve_scf(P, tight_scf());
  c.target = sol.density;
  c.options.reference_potential = sp::InversionOptions::ReferencePotential::ExternalAndHartree;
  c.options.constant = sp::InversionOptions::Constant::Ionization;
  for (const auto& l : sol.levels)
    if (l.occupation > 0) c.options.ionization_energy = -l.energy;  // 2p is the last occupied level
  return c;
}

}  // namespace

void invert_report() {
  std::printf("\nKohn-Sham inversion: iterations and wall time to a density error int|n - n_t| (electrons)\n");
  std::printf("  %-36s %-8s %8s %6s %10s %10s %12s\n", "target", "method", "tol", "iter", "seconds", "alpha",
              "int|n-n_t|");
  for (Case c : {line_two_electrons(), neon()}) {
    for (auto method : {sp::InversionOptions::Method::WuYang, sp::InversionOptions::Method::Direct}) {
      for (double tol : {1e-6, 1e-8}) {
        if (method == sp::InversionOptions::Method::Direct && tol < 1e-6) continue;
        sp::InversionOptions o = c.options;
        o.method = method;
        o.density_tolerance = tol;
        const auto t0 = std::chrono::steady_clock::now();
        try {
          const sp::InversionResult r = sp::invert_density(c.system, c.target, o);
          const double sec = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
          std::printf("  %-36s %-8s %8.0e %6d %10.3f %10.2e %12.3e\n", c.name.c_str(),
                      method == sp::InversionOptions::Method::WuYang ? "wu_yang" : "direct", tol, r.iterations, sec,
                      r.regularization, r.density_l1);
        } catch (const std::exception& e) {
          std::printf("  %-36s %-8s %8.0e  failed: %s\n", c.name.c_str(),
                      method == sp::InversionOptions::Method::WuYang ? "wu_yang" : "direct", tol, e.what());
        }
      }
    }
  }
}
