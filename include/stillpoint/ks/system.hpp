#pragma once
// What to compute: one physical system, as the input file describes it, before discretization.
#include <optional>
#include <string>
#include <vector>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/external_potential.hpp"
#include "stillpoint/xc/formula.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

/// A nucleus on the line: attraction -charge / sqrt((x - position)^2 + softening^2).
struct Nucleus1d {
  double charge = 1.0;
  double position = 0.0;
  double softening = 1.0;
};

struct LineSystem {
  std::vector<Nucleus1d> nuclei;
  /// Extra external potentials added to the nuclear attraction.
  std::vector<ExternalTerm> potentials;
  /// Electron–electron interaction 1/sqrt(u^2 + a^2); also passed to the 1D libxc functionals.
  double electron_softening = 1.0;
  /// false: non-interacting electrons (no Hartree term, and no exchange-correlation unless given).
  /// Also honoured for radial atoms (used by Kohn–Sham inversion), though input files set it
  /// only for line systems.
  bool interacting = true;
  /// Softening of the nucleus–nucleus repulsion Z_i Z_j / sqrt(d^2 + b^2); NaN means
  /// "same as electron_softening" so all charges interact by one softened law.
  double nucleus_softening = std::numeric_limits<double>::quiet_NaN();
};

struct AtomSystem {
  int Z = 1;
  /// Occupied subshells (both spins); spin-polarized runs split them by Hund's rule.
  std::vector<Subshell> configuration;
};

struct SystemSpec {
  std::string name = "system";
  Geometry geometry = Geometry::Line;
  LineSystem line;
  AtomSystem atom;
  /// Net charge: electrons = (sum of nuclear charges) - charge.
  double charge = 0.0;
  bool spin_polarized = false;
  /// Line only: electrons per spin when polarized (default: ceil/floor of N/2).
  std::optional<double> n_up, n_down;
  /// Line only: explicit occupations per spin channel, lowest state first (empty = aufbau).
  std::vector<std::vector<double>> occupations;
  /// libxc names (or numbers), summed; empty = no exchange-correlation.
  std::vector<std::string> xc;
  /// Weight of each xc term (empty: all 1); a differentiable parameter family.
  std::vector<double> xc_weights;
  /// Parameters of each model xc term (one list per term; an empty list means the defaults).
  std::vector<std::vector<double>> xc_parameters;
  /// User formulas that "formula:<name>" entries of xc refer to.
  std::vector<FormulaSpec> formulas;
  /// Points whose total density is below this are dropped by every xc term (see XcSettings).
  double density_threshold = 1e-30;
  /// Extra potential at every mesh node (hartree), added to v_ext; empty = none.
  /// A differentiable "grid potential" parameter family; its size must equal the node count.
  std::vector<double> nodal_potential;
  MeshSpec grid;
  /// Name of the preset the grid came from ("custom" if set explicitly), for reports.
  std::string grid_name = "default";
  /// Line only: unoccupied states computed and reported above the highest occupied one.
  int unoccupied_levels = 2;

  /// Total electron count implied by nuclei and charge.
  double electron_count() const;
};

/// The mesh the system is discretized on (what KsProblem builds), without the rest of the set-up.
Mesh mesh_of(const SystemSpec& s);

}  // namespace stillpoint
