#pragma once
// The self-consistent field: the fixed point v = V(N(v)) of the Kohn–Sham map.
#include <Eigen/Dense>
#include <string>
#include <vector>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace stillpoint {

struct ScfOptions {
  /// Iteration limit; reaching it without convergence is a NumericalError with the history.
  int max_iterations = 200;
  /// Converged when the density-weighted RMS of v_out - v_in (hartree; each spin weighted by its own density) is below this ...
  double potential_tolerance = 1e-9;
  /// ... and the total energy changed by less than this between iterations (hartree) ...
  double energy_tolerance = 1e-10;
  /// ... and no computed eigenvalue changed by more than this (hartree). This also converges
  /// unoccupied levels that are reported, which the density weighting alone would not. Levels
  /// of a spin without electrons are exempt, and an unoccupied level that has not settled 50
  /// iterations after everything else did is reported with Level::settled = false.
  double eigenvalue_tolerance = 1e-9;
  /// Pulay (DIIS) mixing: fraction of the extrapolated residual added to the extrapolated input.
  double mixing = 0.5;
  /// Number of previous iterates kept by Pulay mixing (1 = linear mixing).
  int history = 8;
  /// Print one line per iteration to stderr.
  bool verbose = false;
};

struct EnergyParts {
  double total = 0.0;
  double kinetic = 0.0;            ///< non-interacting kinetic energy T_s
  double external = 0.0;           ///< <n, v_ext> (electron–nucleus for atoms)
  double hartree = 0.0;
  double xc = 0.0;
  double nuclear_repulsion = 0.0;  ///< line systems with several nuclei
  double band = 0.0;               ///< sum of occupied eigenvalues weighted by occupation
};

struct ScfStep {
  int iteration = 0;
  double energy = 0.0;
  double residual = 0.0;           ///< density-weighted RMS of v_out - v_in, hartree
  double eigenvalue_change = 0.0;  ///< max |change| of a level's eigenvalue (spins with electrons), hartree
};

struct Level {
  std::string label;  ///< "2p" (atoms) or "3" (line: third state of its spin channel)
  int channel = 0;    ///< index into KsProblem::channels()
  int index = 0;      ///< state index inside the channel
  int spin = 0;
  int l = 0;
  double energy = 0.0;      ///< hartree
  double occupation = 0.0;  ///< electrons
  /// false for an unoccupied level whose eigenvalue still changed by more than the eigenvalue
  /// tolerance at convergence (its potential is felt by no electron and, for some functionals,
  /// singular where that spin's density vanishes): the value is not a converged result.
  bool settled = true;
};

struct KsSolution {
  std::vector<ChannelStates> states;
  std::vector<Eigen::VectorXd> density;  ///< per spin, electrons / bohr (line) or / bohr^3
  std::vector<Eigen::VectorXd> v_s;      ///< effective potential per spin (the converged input)
  std::vector<Eigen::VectorXd> v_xc;     ///< per spin
  Eigen::VectorXd v_h, v_ext;
  EnergyParts energy;
  std::vector<Level> levels;  ///< every computed state, channel by channel
  std::vector<ScfStep> history;
  std::vector<EigenWarmStart> warm;  ///< eigensolver state per channel, for warm starts
  int iterations = 0;
  /// 0 when the tolerances were met as asked. Otherwise the measured rounding floor of the
  /// Kohn–Sham map (hartree, the residual metric): some functionals (BEEF-vdW's Legendre
  /// series, FT97) turn rounding-level changes of the density into potential changes above
  /// potential_tolerance, so no iterate can get closer. The SCF then accepts an iterate whose
  /// residual, energy and eigenvalue changes are within kFloorFactor of the floors it measured.
  double residual_floor = 0.0;

  Eigen::VectorXd total_density() const;
};

/// Every computed state of every channel, labelled, with its occupation; `spin_shift` (empty,
/// or one constant per spin, hartree) is added to the energies of that spin.
std::vector<Level> labelled_levels(const KsProblem& problem, const std::vector<ChannelStates>& states,
                                   const std::vector<double>& spin_shift = {});

/// Solves the SCF from `start` (a previous solution of the same problem, warm start) or from
/// the problem's initial potential. Throws NumericalError (with the residual history as
/// details) when it does not converge.
KsSolution solve_scf(const KsProblem& problem, const ScfOptions& options = {}, const KsSolution* start = nullptr);

/// Energies and output potentials for given input potentials and the states they produce.
/// Used by the SCF and by anything that needs the Kohn–Sham map itself.
struct MapEvaluation {
  std::vector<ChannelStates> states;
  std::vector<Eigen::VectorXd> density, v_out, v_xc;
  Eigen::VectorXd v_h;
  EnergyParts energy;
};
MapEvaluation evaluate_ks_map(const KsProblem& problem, const std::vector<Eigen::VectorXd>& v_in,
                              std::vector<EigenWarmStart>& warm);

/// An SCF that failed although no setting was at fault: its best iterate violates the ripple
/// stability bound (ripple_stability in xc/on_mesh.hpp), so this functional has no stable
/// self-consistent solution for this system and no mixing, iteration limit or grid changes
/// that. It is still a NumericalError (exit code 3); the message says to choose another
/// functional, and details() holds the residual history.
class UnstableFunctionalError : public NumericalError {
 public:
  UnstableFunctionalError(const std::string& what, std::vector<std::string> details, const RippleStability& where)
      : NumericalError(what, std::move(details)), where_(where) {}
  const RippleStability& stability() const noexcept { return where_; }

 private:
  RippleStability where_;
};

}  // namespace stillpoint
