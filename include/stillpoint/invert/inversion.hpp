#pragma once
// Kohn–Sham inversion: the effective potential v_s whose non-interacting ground state (with the
// system's fixed occupations) has a given target density, and, for interacting systems, the
// exchange-correlation potential v_xc = v_s − v_ext − v_H[n_t] behind it.
//
// Unknowns are the nodal values of Δ = v − v_ref at every mesh node, one vector per spin.
// Two methods share the discrete Kohn–Sham map and its response (docs/theory.md §3, §6, §8):
//
//   Wu–Yang (default). Maximize the concave functional
//       W(v) = Σ_i f_i ε_i(v) − Σ_k W_k v_k n_t,k   −  (α/2) Σ_s Δ_sᵀ K Δ_s
//     whose gradient is W_k (n_k − n_t,k) − α (KΔ)_k and whose Hessian is A − αK, where
//     A = diag(W) χ0 is the static response in the node basis (exact for the discretization,
//     from all eigenpairs) and K the stiffness matrix of ∫|∇Δ|² (Tikhonov smoothness). Newton
//     steps solved densely, with a backtracking line search.
//   Direct minimization. Minimize J(v) = ½ Σ W (n − n_t)² + (α/2) Σ_s Δ_sᵀ K Δ_s, gradient
//     A (n − n_t) + αKΔ (the adjoint of the density residual through χ0), by Gauss–Newton
//     steps (A W⁻¹ A + αK) δ = −g solved by preconditioned conjugate gradients
//     (Newton–Krylov), with a backtracking line search.
//
// The constant of each spin's potential (χ0 and K both annihilate constants) is fixed
// afterwards: Δ → 0 at the outer edge of the grid (v_s follows the reference potential there), or the highest
// occupied eigenvalue equals −I for a given ionization energy I. Where the target density is
// tiny the data no longer determine v: there Δ is the smoothest continuation that the penalty
// allows, so v follows the reference potential's long-range behaviour.
//
// All quantities in hartree atomic units (hartree, bohr; densities per bohr on the line and
// per bohr³ for atoms).
#include <Eigen/Dense>
#include <functional>
#include <limits>
#include <string>
#include <vector>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/input.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/ks/system.hpp"

namespace stillpoint {

/// A target density on a mesh, with what had to be done to put it there.
struct TargetDensity {
  std::string source;                    ///< file it came from (for reports)
  std::vector<Eigen::VectorXd> density;  ///< per spin, at every mesh node
  /// Nodes where the table covers the mesh (outside it the density was extrapolated).
  std::vector<bool> covered;
  double electrons_in_table = 0.0;  ///< Σ W n before normalization
  double scale = 1.0;               ///< factor applied so that Σ W n = the system's electron count
  bool exact_nodes = false;         ///< the table's positions are the mesh nodes themselves
  std::string position_column, density_columns;
  std::vector<std::string> warnings;
};

/// Reads a density table and puts it on `mesh`.
///
/// Accepted layout: comma- or space-separated columns, '#' comments and blank lines skipped,
/// an optional header line. With a header the position column is `x_bohr`, `r_bohr`, `x` or
/// `r` (else the first column); the density column is `column` if given, else the first of
/// `n_per_bohr`, `n_per_bohr3`, `n`, `density`, else the first column whose name starts with
/// `n` (spin-polarized systems: the columns starting with `n_up` and `n_down`). Without a header:
/// position, density (polarized: position, n_up, n_down). This covers the `_density.csv` files of
/// `solve --output` and two-column tables from anywhere else. Positions must increase strictly;
/// densities must be finite and non-negative. When the positions are the mesh nodes the values
/// are used as they are; otherwise they are interpolated: a natural cubic spline of log n when
/// every tabulated value is positive (smooth, exact for exponential tails, never negative), else
/// monotone cubic Hermite interpolation of n (no new extrema). Nodes outside the table are filled by exponential
/// continuation of the last two rows (radially, below the first row, by its value), with a warning.
/// Each spin's density is normalized to its electron count in `electrons` (one entry per spin;
/// warning when the table was off by more than 1e-8 relative, InputError beyond 2 %). The
/// Dirichlet end nodes get zero. `where` locates the key that named the file in messages.
TargetDensity read_target_density(const std::string& path, const Mesh& mesh, const std::vector<double>& electrons,
                                  const SourceLocation& where, const std::string& column = "");

/// Same, from already parsed columns (positions and one density vector per spin).
TargetDensity target_on_mesh(const std::vector<double>& x, const std::vector<std::vector<double>>& n, const Mesh& mesh,
                             const std::vector<double>& electrons, const std::string& source,
                             const SourceLocation& where = {});

/// Electrons per spin channel implied by the system's occupations.
std::vector<double> electrons_per_spin(const SystemSpec& system);

struct InversionOptions {
  enum class Form {
    Interacting,     ///< the system's v_ext and electron count; reconstruct v_xc
    NonInteracting,  ///< reconstruct v_s only
  };
  enum class Method { WuYang, Direct };
  /// The fixed part v_ref of v = v_ref + Δ: it gives v its long-range behaviour where the data
  /// cannot (input key `reference_potential`).
  enum class ReferencePotential {
    ExternalOnly,        ///< v_ref = v_ext ("external_only"; non-interacting default)
    FermiAmaldi,         ///< v_ext + ((N−1)/N) v_H[n_t]: v_xc → −v_H/N ~ −1/r far out (interacting default)
    ExternalAndHartree,  ///< v_ext + v_H[n_t]: v_xc → 0 far out (densities from local functionals)
  };
  enum class Constant {
    Asymptotic,  ///< v_s equals the reference potential at the outer edge of the grid
    Ionization,  ///< the highest occupied level equals −ionization_energy
  };
  Form form = Form::Interacting;
  Method method = Method::WuYang;
  ReferencePotential reference_potential = ReferencePotential::FermiAmaldi;
  Constant constant = Constant::Asymptotic;
  /// I in hartree (Constant::Ionization): the highest occupied level of either spin is −I,
  /// and the other spin (polarized systems) keeps the edge offset the data give it.
  double ionization_energy = std::numeric_limits<double>::quiet_NaN();
  /// Spin-polarized, Constant::Ionization: I_σ = −ε_HOMO,σ per spin (up, down), overriding
  /// `ionization_energy`. Needed for the minority spin: its constant is set where its own
  /// density has died out, and there (for the functionals of spin densities, in LSD for
  /// example) its v_xc still depends on the majority density, so the edge condition cannot fix it.
  std::vector<double> spin_ionization_energies;
  /// α > 0: one fixed regularization. 0: automatic continuation from `regularization_start`,
  /// dividing by `regularization_factor` until the density error is below `density_tolerance`.
  double regularization = 0.0;
  double regularization_start = 1e-4;
  double regularization_factor = 10.0;
  /// Smallest α the continuation tries; not reaching the tolerance there is a NumericalError.
  double regularization_min = 1e-16;
  /// Required ∫|n − n_t| (electrons).
  double density_tolerance = 1e-8;
  /// The reconstruction is flagged trustworthy where the target density exceeds this.
  double trust_threshold = 1e-6;
  /// Newton (or Gauss–Newton) iterations over all regularization levels.
  int max_iterations = 200;
  /// Conjugate-gradient iterations per Gauss–Newton step (direct method).
  int max_krylov_iterations = 2000;
  /// Called with one line per iteration when set.
  std::function<void(const std::string&)> progress;
};

struct InversionStep {
  int iteration = 0;
  double regularization = 0.0;
  double objective = 0.0;      ///< the method's regularized objective (hartree for Wu–Yang)
  double density_l1 = 0.0;     ///< ∫|n − n_t|, electrons
  double density_max = 0.0;    ///< max |n − n_t| over the nodes
  double step = 0.0;           ///< line-search step length taken
  int krylov_iterations = 0;   ///< CG iterations of the step (direct method)
};

struct InversionResult {
  std::vector<Eigen::VectorXd> v_s;    ///< per spin, hartree, every node (radial r = 0 node: copy of node 1)
  std::vector<Eigen::VectorXd> v_xc;   ///< per spin (interacting form; empty otherwise)
  std::vector<Eigen::VectorXd> v_hxc;  ///< per spin, v_s − v_ext (interacting form; empty otherwise)
  std::vector<Eigen::VectorXd> v_reference;
  Eigen::VectorXd v_ext, v_h;  ///< v_h of the target density (zero if not used)
  std::vector<Eigen::VectorXd> density, target;
  /// The model functional's v_xc on the target density (when the system names xc).
  std::vector<Eigen::VectorXd> v_xc_model;
  std::string model_functional;
  std::vector<bool> trusted;  ///< per node: target above trust_threshold and covered by the table
  double density_l1 = 0.0, density_max = 0.0;
  double regularization = 0.0;
  int iterations = 0;
  std::vector<InversionStep> history;
  std::vector<Level> levels;
  double homo = 0.0;               ///< highest occupied eigenvalue of the final v_s
  std::vector<double> shift;       ///< constant added per spin by the constant condition
  double tail_mismatch = 0.0;      ///< line: |Δ(−L) − Δ(+L)| before the shift, hartree
  double seconds = 0.0;
};

/// Inverts `target` (per spin, at every node of the system's mesh). `system` is the system as
/// the input describes it: its v_ext, electron count, occupations, grid, and (optionally) its
/// xc, used only as the model v_xc that the reconstruction is compared with.
/// Throws InputError for unusable options and NumericalError when the density tolerance is not
/// reached or a solve fails.
/// `covered` (optional, per node) marks where the target came from data rather than
/// extrapolation; uncovered nodes are never flagged trustworthy.
InversionResult invert_density(const SystemSpec& system, const std::vector<Eigen::VectorXd>& target,
                               const InversionOptions& options, const std::vector<bool>& covered = {});

/// The discrete exact v_s of a single doubly occupied orbital with nodal density n (one spin
/// channel holding two electrons, or one electron spin-polarized), up to the constant ε = 0:
/// v_k = −(T̃ c)_k / c_k with c = √(W n / f) the orbital in the scaled basis (interior nodes).
/// The discrete counterpart of v_s = ε + (1/2)(√n)''/√n (docs/theory.md §8). Radial: l = 0.
Eigen::VectorXd single_orbital_potential(const Mesh& mesh, const Eigen::VectorXd& n, double occupation);

/// The Wu–Yang Hessian A = diag(W) χ0 as a dense matrix on the interior nodes of spin `spin`,
/// for the states of a non-interacting problem in potential v (every eigenpair, dense). Exposed
/// for tests (it must agree with Response::chi0).
Eigen::MatrixXd wu_yang_hessian(const SystemSpec& system, const std::vector<Eigen::VectorXd>& v, int spin);

/// An `invert` input file: one [[system]] (as for `solve`), an optional [scf] table (unused
/// keys are still checked) and an [invert] table. Keys are documented in docs/invert.md.
struct InvertInput {
  std::string file;
  SystemSpec system;
  SourceLocation system_location;
  std::string target_file;  ///< resolved path of the target table
  SourceLocation target_location;
  std::string target_column;
  InversionOptions options;
};

InvertInput read_invert_input(const std::string& path);
InvertInput parse_invert_input(const std::string& text, const std::string& name);

/// Report text: a summary for the terminal, the JSON document, the CSV table and a gnuplot
/// script that draws `csv_name` into `png_name` and `svg_name` (file names relative to the
/// script's directory). Every number is finite (NumericalError otherwise).
std::string format_inversion(const InvertInput& in, const TargetDensity& t, const InversionResult& r);
std::string inversion_json(const InvertInput& in, const TargetDensity& t, const InversionResult& r);
std::string inversion_csv(const InvertInput& in, const InversionResult& r);
std::string inversion_gnuplot(const InvertInput& in, const InversionResult& r, const std::string& csv_name,
                              const std::string& png_name, const std::string& svg_name);

}  // namespace stillpoint
