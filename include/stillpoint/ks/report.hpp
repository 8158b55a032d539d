#pragma once
// Human-readable and machine-readable reports of a converged Kohn–Sham solution.
#include <string>

#include "stillpoint/ks/problem.hpp"
#include "stillpoint/ks/scf.hpp"

namespace stillpoint {

/// Text summary: energy parts, levels with labels, spins and occupations, SCF iterations.
std::string format_solution(const KsProblem& problem, const KsSolution& solution);

/// JSON summary (as a string): system, grid, functional, energies, levels, SCF history.
std::string solution_json(const KsProblem& problem, const KsSolution& solution);

/// Writes DIR/NAME.json, DIR/NAME_density.csv and DIR/NAME_potentials.csv atomically.
/// Refuses (NumericalError) to write anything non-finite.
void write_solution_files(const std::string& dir, const KsProblem& problem, const KsSolution& solution);

}  // namespace stillpoint
