// Radial LDA/LSD atoms against published reference data, and the grid convergence behind the
// claim that the "default" radial preset reproduces them.
//
// Reference: NIST Standard Reference Database 141, "Atomic Reference Data for Electronic
// Structure Calculations", S. Kotochigova, Z. H. Levine, E. L. Shirley, M. D. Stiles,
// C. W. Clark, Phys. Rev. A 55, 191 (1997) [read: the Mg and Mg+ rows of the NIST element
// page, in basis-data/reference/nist-lda-lsd.csv; check-values §4f]. Functional: Slater
// exchange + VWN (libxc lda_x + lda_c_vwn).
#include <gtest/gtest.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/ks/system.hpp"

namespace sp = stillpoint;

// The NIST table prints 6 decimals, so 1e-6 hartree is the resolution of the reference.
TEST(NistReference, AllTableValuesWithinMicroHartree) {
  const auto rows = sp::read_reference_table(STILLPOINT_REFERENCE_DIR "/nist-lda-lsd.csv");
  ASSERT_EQ(rows.size(), 44u);
  sp::CheckOptions opt;
  opt.tolerance = 1e-6;
  const sp::CheckReport rep = sp::run_reference_check(rows, opt);
  EXPECT_EQ(rep.n_checked, 44);
  EXPECT_EQ(rep.n_failed, 0) << sp::format_check_table(rep, opt.tolerance);
  for (const auto& r : rep.results)
    EXPECT_TRUE(r.passed) << r.row.symbol << (r.row.charge ? "+" : "") << " " << r.row.approximation << " "
                          << r.row.quantity << ": reference " << r.row.value << ", computed " << r.computed;
  std::printf("[ NIST ] %d values, max |deviation| %.2e Ha, %.2f s\n", rep.n_checked, rep.max_abs_deviation,
              rep.seconds);
}

namespace {

// ---------------------------------------------------------------------------------------------
// Grid convergence: "default" against "tight" (basis-data/grid-presets.toml claims 1e-8 hartree
// for total energies and eigenvalues of the LDA/LSD atoms and cations up to Z = 54).

struct AtomCase {
  int Z;
  int charge;
  bool lsd;
};

struct Deviation {
  double energy = 0.0;      // |E_default - E_tight|
  double eigenvalue = 0.0;  // max over all bound levels (occupied or not)
  std::string worst_level;
  double occupied = 0.0;  // max over occupied levels only (for the report)
  std::string unbound;    // levels with eps >= 0 on either grid, not compared
  double seconds = 0.0;
};

sp::ScfOptions tight_scf() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-10;
  // Not tighter: the total energy of Xe fluctuates by ~2e-10 Ha between converged iterations
  // (rounding at 3e-14 relative), so a 1e-12 criterion is met only by chance (measured: up to
  // 360 iterations on refined grids where 30-40 reach the potential tolerance).
  o.energy_tolerance = 1e-9;
  o.eigenvalue_tolerance = 1e-10;
  o.max_iterations = 300;
  return o;
}

sp::KsSolution solve_atom(const AtomCase& c, const std::string& grid) {
  sp::SystemSpec s;
  s.name = sp::element_symbol(c.Z);
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = c.Z;
  s.charge = c.charge;
  s.atom.configuration = sp::parse_configuration(sp::default_configuration(c.Z, c.charge));
  s.spin_polarized = c.lsd;
  s.xc = {"lda_x", "lda_c_vwn"};
  s.grid = sp::grid_preset(sp::Geometry::Radial, grid);
  s.grid_name = grid;
  const sp::KsProblem P(s);
  return sp::solve_scf(P, tight_scf());
}

Deviation compare_grids(const AtomCase& c) {
  const auto t0 = std::chrono::steady_clock::now();
  const sp::KsSolution a = solve_atom(c, "default");
  const sp::KsSolution b = solve_atom(c, "tight");
  Deviation d;
  d.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  d.energy = std::abs(a.energy.total - b.energy.total);
  EXPECT_EQ(a.levels.size(), b.levels.size());
  for (std::size_t i = 0; i < std::min(a.levels.size(), b.levels.size()); ++i) {
    EXPECT_EQ(a.levels[i].label, b.levels[i].label);
    const std::string name = a.levels[i].label + (c.lsd ? (a.levels[i].spin == 0 ? " (maj)" : " (min)") : "");
    // A level at or above zero is not bound: it is a state of the box [0, r_max], and its
    // energy depends on r_max by construction (an empty minority 1s of LSD H is one), so it
    // is not a grid-convergence quantity. Only empty levels can be unbound here.
    if (a.levels[i].energy >= 0.0 || b.levels[i].energy >= 0.0) {
      EXPECT_EQ(a.levels[i].occupation, 0.0) << name << " is occupied but unbound";
      d.unbound += (d.unbound.empty() ? "" : ", ") + name;
      continue;
    }
    const double dev = std::abs(a.levels[i].energy - b.levels[i].energy);
    if (a.levels[i].occupation > 0.0) d.occupied = std::max(d.occupied, dev);
    if (dev > d.eigenvalue) {
      d.eigenvalue = dev;
      d.worst_level = name;
    }
  }
  return d;
}

std::string describe(const AtomCase& c) {
  return sp::element_symbol(c.Z) + (c.charge ? "+" : "") + (c.lsd ? " LSD" : " LDA");
}

constexpr double kGridTolerance = 1e-8;

}  // namespace

// A handful of atoms across the table (closed and open shells, 3d and 4d metals, the heaviest
// atom covered), neutral and cation. About 10 s on one core.
//
TEST(NistReference, DefaultGridMatchesTightSubset) {
  std::vector<AtomCase> cases;
  for (const auto& [Z, lsd] : std::vector<std::pair<int, bool>>{
           {2, false}, {7, true}, {18, false}, {24, true}, {29, false}, {36, false}, {46, false}, {54, false}})
    for (int charge : {0, 1}) cases.push_back({Z, charge, lsd});
  double max_e = 0.0, max_eps = 0.0, max_occ = 0.0;
  for (const AtomCase& c : cases) {
    const Deviation d = compare_grids(c);
    std::printf("[ grid ] %-10s |dE| = %.2e  max |d eps| = %.2e (%s), occupied %.2e  %.2f s%s%s\n", describe(c).c_str(),
                d.energy, d.eigenvalue, d.worst_level.c_str(), d.occupied, d.seconds,
                d.unbound.empty() ? "" : "  unbound, not compared: ", d.unbound.c_str());
    max_e = std::max(max_e, d.energy);
    max_eps = std::max(max_eps, d.eigenvalue);
    max_occ = std::max(max_occ, d.occupied);
    EXPECT_LE(d.energy, kGridTolerance) << describe(c) << " total energy, default vs tight";
    EXPECT_LE(d.eigenvalue, kGridTolerance) << describe(c) << " eigenvalue " << d.worst_level << ", default vs tight";
  }
  std::printf("[ grid ] subset: max |dE| = %.2e, max |d eps| = %.2e (occupied levels: %.2e)\n", max_e, max_eps,
              max_occ);
}

// The full study: Z = 1..54, neutral and cation, LDA and LSD (H+ has no electrons), default
// against tight for the total energy and every bound eigenvalue. Prints every atom outside
// 1e-8 and the maxima.
TEST(NistReference, DefaultGridMatchesTightAllAtomsLong) {
  double max_e = 0.0, max_eps = 0.0, max_occ = 0.0, total_seconds = 0.0;
  std::string worst_e, worst_eps, worst_occ;
  int atoms = 0;
  for (int Z = 1; Z <= 54; ++Z)
    for (int charge : {0, 1}) {
      if (Z - charge < 1) continue;
      for (bool lsd : {false, true}) {
        const AtomCase c{Z, charge, lsd};
        const Deviation d = compare_grids(c);
        ++atoms;
        total_seconds += d.seconds;
        if (d.energy > max_e) {
          max_e = d.energy;
          worst_e = describe(c);
        }
        if (d.eigenvalue > max_eps) {
          max_eps = d.eigenvalue;
          worst_eps = describe(c) + " " + d.worst_level;
        }
        if (d.occupied > max_occ) {
          max_occ = d.occupied;
          worst_occ = describe(c);
        }
        if (d.energy > kGridTolerance || d.eigenvalue > kGridTolerance || !d.unbound.empty())
          std::printf("[ grid ] %-10s |dE| = %.2e  max |d eps| = %.2e (%s), occupied %.2e%s%s\n", describe(c).c_str(),
                      d.energy, d.eigenvalue, d.worst_level.c_str(), d.occupied,
                      d.unbound.empty() ? "" : "  unbound, not compared: ", d.unbound.c_str());
        EXPECT_LE(d.energy, kGridTolerance) << describe(c) << " total energy, default vs tight";
        EXPECT_LE(d.eigenvalue, kGridTolerance) << describe(c) << " eigenvalue " << d.worst_level;
      }
    }
  std::printf(
      "[ grid ] Z = 1..54, %d atoms: max |dE| = %.2e (%s), max |d eps| = %.2e (%s), occupied levels "
      "%.2e (%s), %.1f s\n",
      atoms, max_e, worst_e.c_str(), max_eps, worst_eps.c_str(), max_occ, worst_occ.c_str(), total_seconds);
}
