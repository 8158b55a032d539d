#pragma once
// Element symbols and electron configurations of spherical atoms.
//
// A configuration here is only a list of occupied (n, l) subshells; the solver averages
// every open subshell over its magnetic sublevels, so no m or term information is kept.
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "stillpoint/common/errors.hpp"

namespace stillpoint {

/// One (n, l) subshell and its occupation.
struct Subshell {
  /// Principal quantum number, >= 1.
  int n;
  /// Angular momentum, 0 <= l < n.
  int l;
  /// Electrons in the subshell counting both spins, 0 <= occupation <= 2(2l+1).
  /// Fractional values are allowed (ensemble averages, Janak-type derivatives).
  double occupation;

  friend bool operator==(const Subshell&, const Subshell&) = default;
};

/// A subshell's electrons divided between the two spin channels.
struct SpinSubshell {
  int n;
  int l;
  /// Electrons in the majority (spin-up) channel, at most 2l+1.
  double majority;
  /// Electrons in the minority (spin-down) channel, at most 2l+1.
  double minority;

  friend bool operator==(const SpinSubshell&, const SpinSubshell&) = default;
};

/// One entry of the built-in table of ground configurations.
struct TabulatedConfiguration {
  int Z;
  /// Ionic charge: 0 for the neutral atom, 1 for the singly charged cation.
  int charge;
  /// Canonical spelling, e.g. "[Ne] 3s2 3p4"; parse it with parse_configuration.
  std::string_view configuration;
};

/// Atomic number from an element symbol ("Mg", "mg", "MG") or a decimal number ("12").
/// Surrounding whitespace is ignored. Valid range is Z = 1..118.
/// Throws InputError at `where`; for a misspelt symbol the message suggests the nearest one.
int atomic_number(std::string_view symbol_or_number, const SourceLocation& where = {});

/// Element symbol for Z = 1..118 with conventional capitalisation ("He", "Og").
/// Throws InputError outside that range.
std::string element_symbol(int Z);

/// Parses an electron configuration such as "1s2 2s2 2p6", "[Ne] 3s2 3p1", "[Ne]3s2 3p4",
/// "[Ar] 3d10 4s2 4p1", "[He] 2s2 2p0.5" or "[Ne] 3s0".
///
/// Tokens are separated by whitespace. A token is either a noble-gas core ([He], [Ne], [Ar],
/// [Kr], [Xe], [Rn]), optionally followed directly by a subshell, or a subshell written as
/// n, an l letter (s p d f g) and a non-negative decimal occupation. Zero occupations are
/// kept, so an empty orbital can still be requested. The result is sorted by (n, l).
///
/// Throws InputError naming the offending token and its 1-based column within `text` for:
/// an empty string, an unknown token, l >= n, an occupation outside [0, 2(2l+1)], and a
/// subshell given twice (also when it is already part of a core, e.g. "[Ne] 2p6").
/// The message always states the column within `text`. The error's where() is `where`
/// (file, line, key as given) with the column set to the column within `text`, or, if
/// where.column is set, taken as the file column of text's first character and advanced.
std::vector<Subshell> parse_configuration(std::string_view text, const SourceLocation& where = {});

/// Default ground configuration of the atom or ion with nuclear charge Z and net charge
/// `charge` (electrons = Z - charge), as a string accepted by parse_configuration.
///
/// Neutral atoms and singly charged cations with Z <= 54 come from the built-in table (see
/// ground_configuration_table). Every other case is filled by the Madelung rule (increasing
/// n + l, then increasing n); that is only a starting point, known to be wrong for many
/// transition-metal ions, lanthanides and actinides, and callers should let users override it.
///
/// Throws InputError if Z is outside 1..118, if there are no electrons, or if there are more
/// than 2Z electrons (no nucleus binds that many) or more than 120 (the Madelung sequence
/// would need g shells).
std::string default_configuration(int Z, int charge, const SourceLocation& where = {});

/// The built-in ground configurations, ordered by Z and then charge. The same rows, with
/// their sources, are in basis-data/ground-configurations.csv.
std::span<const TabulatedConfiguration> ground_configuration_table();

/// Total number of electrons.
double electron_count(const std::vector<Subshell>& shells);

/// Divides each subshell's electrons between spins by Hund's first rule in its spherically
/// averaged form: fill the majority channel first (up to 2l+1), then the minority channel.
std::vector<SpinSubshell> split_spins_hund(const std::vector<Subshell>& shells);

/// Writes shells in the explicit form "1s2 2s2 2p6 3s1", in the given order, without core
/// abbreviations. Occupations use the shortest decimal that reads back to the same double
/// ("2", "0.5", "1.25"), so parse_configuration(format_configuration(x)) == x for sorted x.
/// Throws InputError for l outside 0..4, which has no letter.
std::string format_configuration(const std::vector<Subshell>& shells);

}  // namespace stillpoint
