// Solves 1D soft-Coulomb hydrogen (softening sqrt(2)), whose ground state is exactly -1/2
// hartree (check-values.md §1), through the installed library.
#include <cmath>
#include <cstdio>

#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/scf.hpp"

int main() {
  using namespace stillpoint;
  SystemSpec s;
  s.geometry = Geometry::Line;
  s.line.interacting = false;
  s.line.nuclei = {{1.0, 0.0, std::sqrt(2.0)}};
  s.grid = grid_preset(Geometry::Line, "default");
  KsProblem p(s);
  const KsSolution sol = solve_scf(p);
  std::printf("E0 = %.10f hartree\n", sol.levels[0].energy);
  return std::abs(sol.levels[0].energy + 0.5) < 1e-8 ? 0 : 1;
}
