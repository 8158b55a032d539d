#pragma once
// Exact one- and two-electron references on the line (`stillpoint exact`).
//
// Discretization: the spectral-element basis of Kohn–Sham line systems, in its mass-scaled
// nodal form on the interior nodes (T~ = scaled_kinetic(mesh, 0)). One electron:
// h = T~ + diag(v_ext). Two electrons: the same basis on the product grid,
//
//   H = T~ (x) I + I (x) T~ + diag(v(x1) + v(x2) + w(x1 - x2)),  w(d) = 1 / sqrt(d^2 + a^2),
//
// acting on the coefficient matrix C with C_ij = sqrt(w_i w_j) Psi(x_i, x_j), so that
// H C = T~ C + C T~ + V o C is applied through the Kronecker structure and never formed.
// Singlets have a symmetric spatial part (C = C^T), triplets an antisymmetric one
// (C = -C^T); each sector is solved separately, and every vector the solver touches is kept
// exactly (anti)symmetric, so the sectors cannot mix.
//
// Eigensolver: block Davidson with a Kronecker ("fast diagonalization") preconditioner.
// With h = Q diag(lambda) Q^T, the separable part H0 = h (x) I + I (x) h is inverted exactly
// in O(N^3) by dense products with Q; since 0 < w <= 1/a, H - s and H0 - s are spectrally
// equivalent for a shift s below the spectrum, uniformly in the grid, so the iteration count
// does not grow as the grid is refined (bench/exact_bench.cpp measures this against plain
// Lanczos).
//
// Everything is in hartree atomic units: energies in hartree, lengths in bohr, densities in
// electrons per bohr.
#include <Eigen/Dense>
#include <Eigen/Sparse>
#include <functional>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/ks/system.hpp"
#include "stillpoint/parallel/communicator.hpp"

namespace stillpoint {

// ---------------------------------------------------------------------------------------
// The product-grid eigenproblem
// ---------------------------------------------------------------------------------------

/// Exchange symmetry of a two-electron spatial wave function.
enum class ExchangeSymmetry {
  Symmetric,      ///< Psi(x1, x2) = Psi(x2, x1): spin singlet
  Antisymmetric,  ///< Psi(x1, x2) = -Psi(x2, x1): spin triplet
};

/// "singlet" or "triplet".
const char* spin_state_name(ExchangeSymmetry s);

struct ProductEigenOptions {
  /// Number of lowest states wanted in the sector.
  int states = 1;
  /// Convergence: every wanted state has ||H C - E C||_F <= residual_tolerance (hartree; C
  /// normalized, sum C_ij^2 = 1). The energy error is then below residual^2 / gap. The
  /// tolerance is raised to the rounding floor 100 eps ||H|| when it is set lower.
  double residual_tolerance = 1e-10;
  /// Davidson iterations (one block of preconditioned residuals each).
  int max_iterations = 400;
  /// Preconditioner (H0 - s)^{-1} with s = (lowest pair energy of the sector) - shift_margin
  /// (hartree). Any value > 0 works; small margins (0.01-0.3) were fastest for 1D He, large
  /// ones (> 1/a) slow the iteration down (bench/exact_bench.cpp).
  double shift_margin = 0.1;
};

struct ProductEigenResult {
  Eigen::VectorXd energies;                   ///< electronic energies, ascending, hartree
  std::vector<Eigen::MatrixXd> coefficients;  ///< C per state (N x N, interior nodes), sum C^2 = 1
  Eigen::VectorXd residuals;                  ///< ||H C - E C||_F per state, hartree
  double tolerance_used = 0.0;                ///< the residual tolerance after the rounding floor
  int iterations = 0;
  int hamiltonian_products = 0;
  int preconditioner_products = 0;
  double seconds = 0.0;
};

/// The discretized one- and two-electron Hamiltonians of one line system.
class TwoElectronHamiltonian {
 public:
  /// `v_ext` is given at every mesh node (the end nodes are Dirichlet and unused);
  /// `interacting = false` drops w.
  TwoElectronHamiltonian(const Mesh& mesh, const Eigen::VectorXd& v_ext, double electron_softening, bool interacting);

  /// Number of interior nodes N (the product space has N^2 unknowns).
  int size() const { return n_; }
  const Eigen::SparseMatrix<double>& kinetic() const { return T_; }
  /// All eigenvalues (ascending) and eigenvectors of h = T~ + diag(v_ext): the exact
  /// one-electron problem and the basis of the preconditioner.
  const Eigen::VectorXd& one_electron_energies() const { return lambda_; }
  const Eigen::MatrixXd& one_electron_vectors() const { return Q_; }
  /// V_ij = v_i + v_j + w(x_i - x_j) on interior nodes.
  const Eigen::MatrixXd& pair_potential() const { return V_; }
  /// w(x_i - x_j) on interior nodes (zero when non-interacting).
  const Eigen::MatrixXd& interaction() const { return W_; }

  /// out = H C for C of the given symmetry (out is made exactly (anti)symmetric).
  void apply(const Eigen::MatrixXd& C, Eigen::MatrixXd& out, ExchangeSymmetry s) const;
  /// out = (H0 - shift)^{-1} R, with H0 = h (x) I + I (x) h (shift below 2 lambda_0 for singlets,
  /// below lambda_0 + lambda_1 for triplets).
  void precondition(const Eigen::MatrixXd& R, double shift, Eigen::MatrixXd& out, ExchangeSymmetry s) const;
  /// Lowest eigenpairs of one symmetry sector. Throws NumericalError if not converged.
  ProductEigenResult lowest(ExchangeSymmetry s, const ProductEigenOptions& options) const;
  /// Rough upper bound of ||H|| (sets the rounding floor of residuals).
  double norm_estimate() const { return norm_; }

 private:
  int n_ = 0;
  Eigen::SparseMatrix<double> T_;
  Eigen::VectorXd lambda_;
  Eigen::MatrixXd Q_, V_, W_;
  double norm_ = 0.0;
};

/// Density of a two-electron state at every mesh node, n(x_i) = 2 sum_j w_j Psi(x_i, x_j)^2
/// = 2 sum_j C_ij^2 / w_i (end nodes 0), so that sum_k w_k n_k = 2.
Eigen::VectorXd two_electron_density(const Mesh& mesh, const Eigen::MatrixXd& C);

// ---------------------------------------------------------------------------------------
// The exact Kohn–Sham potential of a one- or two-electron (singlet) density
// ---------------------------------------------------------------------------------------

struct ExactKsPotential {
  double homo = 0.0;  ///< epsilon, hartree
  double trust_density = 0.0;  ///< the threshold used, electrons/bohr
  /// Per mesh node, hartree. At untrusted nodes every potential holds the value of the nearest
  /// trusted node (a continuation, not data).
  Eigen::VectorXd v_s;
  /// 1 where the density is at least the threshold (the potential is data), 0 elsewhere.
  std::vector<char> trusted;
  int trusted_nodes = 0;
  /// The orbital coefficients c_k = sqrt(w_k n_k / f) (f = 2 for two electrons, 1 for one),
  /// on the interior nodes; sum c^2 = 1 for a normalized density.
  Eigen::VectorXd orbital;
};

/// v_s of the single occupied orbital phi = sqrt(n / f) (f = electrons = 1 or 2), in the
/// discrete basis: v_s,k = homo - (T~ c)_k / c_k with c_k = sqrt(w_k n_k / f). This is the
/// discrete form of v_s = homo + (1/2) (sqrt n)'' / sqrt n: c is by construction an
/// eigenvector of T~ + diag(v_s) with eigenvalue homo. Nodes with n < trust_density
/// (electrons/bohr) are marked untrusted and continued from the nearest trusted node.
/// Throws NumericalError if no node is trusted.
ExactKsPotential exact_ks_potential(const Mesh& mesh, const Eigen::SparseMatrix<double>& kinetic,
                                    const Eigen::VectorXd& density, double homo, int electrons, double trust_density);

// ---------------------------------------------------------------------------------------
// One system, end to end
// ---------------------------------------------------------------------------------------

struct ExactOptions {
  /// States per symmetry sector (two electrons: singlets and triplets each; one electron:
  /// the lowest `states` levels).
  int states = 1;
  /// Two electrons: also solve the triplet (antisymmetric) sector.
  bool triplet = true;
  double residual_tolerance = 1e-10;  ///< see ProductEigenOptions
  int max_iterations = 400;
  /// Potentials are data only where n >= trust_density (electrons per bohr, absolute).
  double trust_density = 1e-6;
  /// Repeat the energies at degree p - 2 and in a box of 0.8 L, and report the differences
  /// (ExactGridCheck).
  bool convergence_check = true;
  /// Keep the ground-state coefficients for a pair-density file.
  bool pair_density = false;
};

struct ExactLevel {
  std::string spin;  ///< "singlet", "triplet", or "doublet" (one electron)
  int index = 0;     ///< 0 = lowest of its kind
  double energy = 0.0;    ///< total energy (electronic + nuclear repulsion), hartree
  double residual = 0.0;  ///< ||H C - E C||, hartree (one electron: of the dense eigenvector)
  /// false above the one-electron threshold (ExactResult::threshold): a state of the box, not
  /// of the system; its energy follows the box size.
  bool bound = true;
  Eigen::VectorXd density;  ///< per mesh node, electrons/bohr
};

/// Energy decomposition of the ground state (hartree).
struct ExactEnergyParts {
  double total = 0.0;            ///< electronic + nuclear_repulsion
  double electronic = 0.0;
  double kinetic = 0.0;          ///< T of the interacting state
  double external = 0.0;         ///< integral n v_ext
  double electron_electron = 0.0;  ///< <w(x1 - x2)>
  double nuclear_repulsion = 0.0;
  // Kohn–Sham view of the same density (two-electron singlet or one electron):
  double kinetic_s = 0.0;        ///< T_s = f <phi|T|phi>, phi = sqrt(n/f) (von Weizsaecker)
  double hartree = 0.0;          ///< E_H[n] (soft-Coulomb)
  double exchange = 0.0;         ///< -E_H/2 (two-electron singlet), -E_H (one electron)
  double correlation = 0.0;      ///< electronic - kinetic_s - external - hartree - exchange
};

/// The same energies on a coarser discretization, as an estimate of the discretization error.
/// Two checks are made: "degree" (same elements, degree p - 2) measures the resolution,
/// "box" (half width 0.8 L, same element size and degree) the truncation of the tails by the
/// walls, which dominates for diffuse excited states (Coulomb-like tails decay slowly).
/// Both differences are upper estimates of the errors of the reported values: the
/// reported grid is much better than either comparison grid.
struct ExactGridCheck {
  std::string kind;  ///< "degree" or "box"
  int degree = 0;
  double half_width = 0.0;  ///< bohr
  int nodes = 0;
  /// energy(reported grid) - energy(comparison grid), per level (same order as levels), hartree
  std::vector<double> level_changes;
  double homo_change = 0.0;
  /// max |change| over the levels and the HOMO, hartree
  double max_change = 0.0;
};

struct ExactResult {
  ExactResult(SystemSpec s, Mesh m) : spec(std::move(s)), mesh(std::move(m)) {}
  SystemSpec spec;
  Mesh mesh;
  int electrons = 0;
  Eigen::VectorXd v_ext;  ///< per mesh node, hartree
  double nuclear_repulsion = 0.0;
  /// Singlets first (ascending), then triplets; one electron: the lowest levels.
  std::vector<ExactLevel> levels;
  /// Ground state (lowest singlet; one electron: lowest level).
  Eigen::VectorXd density;
  ExactEnergyParts energy;
  /// Total energy of the system with one electron less: E(N-1) (for N = 1 this is the
  /// nuclear repulsion alone). homo = energy.total - energy_minus_one = -I.
  double energy_minus_one = 0.0;
  /// Exact Kohn–Sham potential of the ground-state density and its parts (per mesh node).
  ExactKsPotential ks;
  Eigen::VectorXd v_h, v_hxc, v_xc;
  /// Ground-state coefficients C (two electrons, when ExactOptions::pair_density).
  Eigen::MatrixXd ground_coefficients;
  /// The checks that could be made (a comparison grid may be refused, e.g. a nucleus too near
  /// the smaller box's wall), and the largest change over them (empty when none was made).
  std::vector<ExactGridCheck> grid_checks;
  /// Largest |change| over the checks of the bound levels and the HOMO (the headline figure).
  std::optional<double> grid_error_estimate;
  /// Per level (same order as levels): largest |change| over the checks; empty without checks.
  std::vector<double> level_error_estimates;
  /// Energy above which a level is unbound: the energy of one electron less in the same
  /// potential (E(N-1), the ion plus the remaining electron at rest far away). Unset for
  /// potentials that need not vanish far out (harmonic or tabulated terms): there every state
  /// is confined.
  std::optional<double> threshold;
  // Solver statistics (sums over the sectors).
  int iterations = 0;
  int hamiltonian_products = 0;
  int preconditioner_products = 0;
  double seconds = 0.0;
  double tolerance_used = 0.0;
};

/// Solves one line system with 1 or 2 electrons. Throws InputError for systems outside that
/// scope (radial atoms, other electron counts) and NumericalError if a solve fails.
ExactResult solve_exact(const SystemSpec& spec, const ExactOptions& options);

// ---------------------------------------------------------------------------------------
// Input files (docs/exact.md) and outputs
// ---------------------------------------------------------------------------------------

struct ExactInput {
  std::string file;
  std::vector<SystemSpec> systems;
  /// Each system's [[system]] table as TOML text (batch members with the parameter applied):
  /// what the manifest stores so that a later program can rebuild the system.
  std::vector<std::string> system_tables;
  std::vector<SourceLocation> system_locations;
  /// Batch value of each system (empty when not in batch mode) and the parameter paths.
  std::vector<double> batch_values;
  std::vector<std::string> batch_parameters;
  std::vector<std::string> batch_templates;  ///< name of the template system of each member
  ExactOptions options;
  std::vector<std::string> warnings;
};

/// Reads `[[system]]` tables (as for `solve`) and an optional `[exact]` table with an optional
/// `[exact.batch]`. Throws InputError (file:line:column: key: message).
ExactInput read_exact_input(const std::string& path);
ExactInput parse_exact_input(const std::string& text, const std::string& name);

/// Every system of `input`, in order; under MPI each rank solves its share and every rank
/// receives all results, bit for bit (equal to a serial run's). `started(i)` is called on the
/// rank that solves system i as it starts. Stops at the first system that fails (in input
/// order), with its error naming the system and where it was defined.
std::vector<ExactResult> solve_exact_systems(const ExactInput& input, const Communicator& ranks = serial_communicator(),
                                             const std::function<void(int)>& started = {});

/// Human-readable summary of one result (units labelled).
std::string format_exact_result(const ExactResult& r);

/// The output files of a run: (file name relative to `output_dir`, content) for every system
/// (NAME.json, NAME_density.csv, NAME_states.csv, optionally NAME_pair_density.csv) and
/// manifest.toml. Table-potential paths in the manifest are rewritten relative to
/// `output_dir`. Throws NumericalError if any value is not finite.
std::vector<std::pair<std::string, std::string>> exact_output_files(const ExactInput& input,
                                                                    const std::vector<ExactResult>& results,
                                                                    const std::string& output_dir);

/// One entry of an exact manifest, read back (for fits and inversions).
struct ExactManifestEntry {
  std::string name;
  SystemSpec system;  ///< rebuilt from the stored [[system]] table
  int electrons = 0;
  double energy = 0.0;  ///< total energy of the ground state, hartree
  double homo = 0.0;    ///< hartree (= -ionization energy)
  std::optional<double> batch_value;
  std::string density_file;  ///< path as written in the manifest (relative to the manifest)
  // Contents of the density file:
  Eigen::VectorXd x, density, weight, v_ext, v_s, v_hxc, v_xc;
  std::vector<char> trusted;
};

struct ExactManifest {
  std::string file;
  std::vector<ExactManifestEntry> entries;
};

/// Reads DIR/manifest.toml (or a manifest path) and every density file it names.
/// Throws InputError naming the file and line of anything malformed.
ExactManifest read_exact_manifest(const std::string& path);

}  // namespace stillpoint
