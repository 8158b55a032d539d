#pragma once
// Internal: lets the input readers (solve, exact, grad, fit, invert) share the [[system]] /
// [scf] reader and the small TOML helpers, so that a key is read, checked and placed the same
// way in every file format.
#include <toml++/toml.h>

#include <sstream>
#include <string>
#include <vector>

#include "common/format.hpp"
#include "stillpoint/common/errors.hpp"

namespace stillpoint::detail {

/// file:line:column of a node.
SourceLocation location(const std::string& file, const toml::node& node, const std::string& key);

/// Location of `path.key` (just `key` when `path` is empty): the key's value if it is there,
/// otherwise the table, so that a missing or defaulted key is still placed.
SourceLocation key_location(const std::string& file, const toml::table& t, const std::string& path, const std::string& key);

/// Largest input file (TOML or CSV) that is read (bytes; docs/input.md).
inline constexpr long long kMaxInputFileBytes = 64LL << 20;

/// The text of an input file; `cannot_open` is the message when it cannot be read. Refuses
/// directories, other non-regular files and files above kMaxInputFileBytes.
std::string read_text_file(const std::string& path, const std::string& cannot_open);

/// A CSV table as a stream, read by read_text_file (same refusals, errors at `where`, which
/// defaults to the file itself) with a leading UTF-8 byte-order mark removed.
std::istringstream open_table(const std::string& path, const std::string& cannot_open, SourceLocation where = {});

/// `s` for a message: non-printable bytes as \xNN, at most `max_chars` characters ("...").
std::string printable(const std::string& s, std::size_t max_chars = 60);

/// A list for a message: all of it when short, else the first few, "...", the last and the count.
std::string preview_list(const std::vector<double>& v, int digits = 6);

/// Parses TOML text, turning a syntax error into an InputError at its line and column whose
/// message is `prefix` followed by the parser's description.
toml::table parse_toml(const std::string& text, const std::string& name, const std::string& prefix = "TOML syntax error: ");

/// `a` followed by `b`.
std::vector<std::string> concat(std::vector<std::string> a, const std::vector<std::string>& b);

/// InputError at the first key of `t` not in `allowed`, with a spelling suggestion and, if
/// `list_valid`, the list of valid keys.
void check_keys(const std::string& file, const toml::table& t, const std::string& path, const std::vector<std::string>& allowed,
                bool list_valid);

/// InputError at `path.old_key` when `t` has it: the key was renamed to `new_key`. `values`
/// (may be empty) says how old values map to new ones. Call before check_keys so that the
/// message names the new key rather than guessing a spelling.
void refuse_renamed_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& old_key,
                        const std::string& new_key, const std::string& values = "");

/// A number (integer or float) that is finite; otherwise "expected a finite number" at `key`.
double finite_number(const std::string& file, const toml::node& n, const std::string& key);

/// `path.key` of `t` read by finite_number, or `def` when the key is absent.
double number_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, double def);

/// `path.key` of `t` as a TOML integer in [lo, hi], or `def` when absent; anything else
/// (floats included) throws `message`.
int int_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, int def, int lo,
            int hi, const std::string& message);

/// `path.key` of `t` as true or false, or `def` when absent.
bool bool_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, bool def);

/// `path.key` of `t` as a string, or `def` when absent.
std::string string_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key,
                       const std::string& def);

}  // namespace stillpoint::detail
