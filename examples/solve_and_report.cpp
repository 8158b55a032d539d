// Smallest use of the library: solve neon in the LDA and print the summary.
#include <iostream>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/ks/report.hpp"

int main() {
  using namespace stillpoint;
  SystemSpec neon;
  neon.name = "Ne";
  neon.geometry = Geometry::Radial;
  neon.atom.Z = 10;
  neon.atom.configuration = parse_configuration(default_configuration(10, 0));
  neon.xc = {"lda_x", "lda_c_vwn"};
  neon.grid = grid_preset(Geometry::Radial, "default");
  KsProblem problem(neon);
  const KsSolution solution = solve_scf(problem);
  std::cout << format_solution(problem, solution);
}
