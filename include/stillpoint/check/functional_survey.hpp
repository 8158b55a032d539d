#pragma once
// The functional survey: every LDA and GGA of the installed libxc, solved self-consistently
// with default settings on a fixed set of atoms and line systems, or refused with its reason.
// It is the evidence behind "any libxc LDA or GGA" (docs/functionals.md is generated from it).
#include <functional>
#include <string>
#include <vector>

#include "stillpoint/ks/system.hpp"
#include "stillpoint/xc/functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace stillpoint {

struct SurveySystem {
  std::string label;  ///< "Ne", "N (polarized)", "line He", ...
  SystemSpec spec;    ///< xc left empty; the survey fills it per functional
};

/// The systems a survey solves. `set`: "ne" (neon only), "docs" (neon and the 1D helium
/// atom: the documentation table), "quick"
/// (He, N polarized, Ne, Ar), "atoms" (H, He, Li, N, Ne, Na, Ar, Kr, unpolarized and
/// polarized), "lines" (1D H, He, Li, Be, unpolarized and polarized), "all" (atoms + lines).
/// Throws InputError for another name.
std::vector<SurveySystem> survey_systems(const std::string& set);

struct SurveyOutcome {
  std::string system;
  bool converged = false;
  int iterations = 0;
  double energy = 0.0;  ///< total energy, hartree
  double residual_floor = 0.0;  ///< KsSolution::residual_floor (0: the tolerances were met as asked)
  /// Refused for this system before the SCF (for example an open shell with a functional whose
  /// minority-spin potential diverges); `error` then holds the reason.
  bool refused = false;
  /// The SCF failed and its best iterate breaks the ripple-stability bound
  /// (UnstableFunctionalError): this functional has no stable self-consistent solution for this
  /// system, whatever the settings. `stability` says where; `error` holds the full diagnosis.
  bool unstable = false;
  RippleStability stability;
  std::string error;    ///< why it failed or was refused (empty when converged)
  bool acceptable() const { return converged || refused || unstable; }
};

struct SurveyRow {
  LibxcEntry entry;
  /// The functional sum that was solved: the functional alone, or Slater exchange (lda_x, or
  /// lda_x_1d_soft on the line) plus a correlation-only functional.
  std::vector<std::string> xc;
  double tail_cut = 0.0;  ///< XcTerm::tail_cut of the functional (0: none)
  double tail_on = 0.0;   ///< XcTerm::tail_on: the switch is complete above this density
  std::string refusal;  ///< why it is refused for every system of the set (empty: it was solved)
  std::vector<SurveyOutcome> outcomes;
  /// Every outcome is acceptable (converged, refused for its system, or unstable there).
  bool all_converged() const;
  bool any_unstable() const;
};

struct SurveyOptions {
  /// Systems evaluated in parallel (each SCF is serial).
  int threads = 1;
  /// Called after each functional (from the calling thread), e.g. for progress lines.
  std::function<void(const SurveyRow&)> progress;
};

/// Surveys one functional on `systems` (atoms and lines each get the functional only when the
/// dimension fits; a functional usable for neither is refused).
SurveyRow survey_functional(const LibxcEntry& entry, const std::vector<SurveySystem>& systems);

/// Surveys every LDA and GGA (and refuses every other functional) of the installed libxc;
/// `only` (libxc names or numbers) restricts it to some of them.
std::vector<SurveyRow> survey_libxc(const std::vector<SurveySystem>& systems, const std::vector<std::string>& only,
                                    const SurveyOptions& options = {});

/// The Markdown page docs/functionals.md: one row per functional with its status. Energies are
/// printed for the systems labelled in `energies_of` (empty: every system); failures, unstable
/// and refused outcomes are listed for every system surveyed.
std::string survey_markdown(const std::vector<SurveyRow>& rows, const std::string& set,
                            const std::vector<std::string>& energies_of = {});

}  // namespace stillpoint
