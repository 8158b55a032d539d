#include "stillpoint/ks/atom_config.hpp"

#include <algorithm>
#include <array>
#include <cctype>
#include <charconv>
#include <cmath>
#include <map>
#include <system_error>
#include <utility>

namespace stillpoint {

namespace {

constexpr std::array<std::string_view, 118> kSymbols = {
    "H",  "He", "Li", "Be", "B",  "C",  "N",  "O",  "F",  "Ne", "Na", "Mg", "Al", "Si", "P",
    "S",  "Cl", "Ar", "K",  "Ca", "Sc", "Ti", "V",  "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn",
    "Ga", "Ge", "As", "Se", "Br", "Kr", "Rb", "Sr", "Y",  "Zr", "Nb", "Mo", "Tc", "Ru", "Rh",
    "Pd", "Ag", "Cd", "In", "Sn", "Sb", "Te", "I",  "Xe", "Cs", "Ba", "La", "Ce", "Pr", "Nd",
    "Pm", "Sm", "Eu", "Gd", "Tb", "Dy", "Ho", "Er", "Tm", "Yb", "Lu", "Hf", "Ta", "W",  "Re",
    "Os", "Ir", "Pt", "Au", "Hg", "Tl", "Pb", "Bi", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Th",
    "Pa", "U",  "Np", "Pu", "Am", "Cm", "Bk", "Cf", "Es", "Fm", "Md", "No", "Lr", "Rf", "Db",
    "Sg", "Bh", "Hs", "Mt", "Ds", "Rg", "Cn", "Nh", "Fl", "Mc", "Lv", "Ts", "Og"};

// Keep this table identical to basis-data/ground-configurations.csv (a test compares them);
// the CSV carries the per-row provenance, the table is what an installed binary uses.
constexpr std::array kGroundTable = {
    // NIST SRD 141 ground configurations, Z = 1..39 (H+ has no electrons and is absent).
    TabulatedConfiguration{1, 0, "1s1"},
    TabulatedConfiguration{2, 0, "1s2"},
    TabulatedConfiguration{2, 1, "1s1"},
    TabulatedConfiguration{3, 0, "[He] 2s1"},
    TabulatedConfiguration{3, 1, "1s2"},
    TabulatedConfiguration{4, 0, "[He] 2s2"},
    TabulatedConfiguration{4, 1, "[He] 2s1"},
    TabulatedConfiguration{5, 0, "[He] 2s2 2p1"},
    TabulatedConfiguration{5, 1, "[He] 2s2"},
    TabulatedConfiguration{6, 0, "[He] 2s2 2p2"},
    TabulatedConfiguration{6, 1, "[He] 2s2 2p1"},
    TabulatedConfiguration{7, 0, "[He] 2s2 2p3"},
    TabulatedConfiguration{7, 1, "[He] 2s2 2p2"},
    TabulatedConfiguration{8, 0, "[He] 2s2 2p4"},
    TabulatedConfiguration{8, 1, "[He] 2s2 2p3"},
    TabulatedConfiguration{9, 0, "[He] 2s2 2p5"},
    TabulatedConfiguration{9, 1, "[He] 2s2 2p4"},
    TabulatedConfiguration{10, 0, "[He] 2s2 2p6"},
    TabulatedConfiguration{10, 1, "[He] 2s2 2p5"},
    TabulatedConfiguration{11, 0, "[Ne] 3s1"},
    TabulatedConfiguration{11, 1, "[He] 2s2 2p6"},
    TabulatedConfiguration{12, 0, "[Ne] 3s2"},
    TabulatedConfiguration{12, 1, "[Ne] 3s1"},
    TabulatedConfiguration{13, 0, "[Ne] 3s2 3p1"},
    TabulatedConfiguration{13, 1, "[Ne] 3s2"},
    TabulatedConfiguration{14, 0, "[Ne] 3s2 3p2"},
    TabulatedConfiguration{14, 1, "[Ne] 3s2 3p1"},
    TabulatedConfiguration{15, 0, "[Ne] 3s2 3p3"},
    TabulatedConfiguration{15, 1, "[Ne] 3s2 3p2"},
    TabulatedConfiguration{16, 0, "[Ne] 3s2 3p4"},
    TabulatedConfiguration{16, 1, "[Ne] 3s2 3p3"},
    TabulatedConfiguration{17, 0, "[Ne] 3s2 3p5"},
    TabulatedConfiguration{17, 1, "[Ne] 3s2 3p4"},
    TabulatedConfiguration{18, 0, "[Ne] 3s2 3p6"},
    TabulatedConfiguration{18, 1, "[Ne] 3s2 3p5"},
    TabulatedConfiguration{19, 0, "[Ar] 4s1"},
    TabulatedConfiguration{19, 1, "[Ne] 3s2 3p6"},
    TabulatedConfiguration{20, 0, "[Ar] 4s2"},
    TabulatedConfiguration{20, 1, "[Ar] 4s1"},
    TabulatedConfiguration{21, 0, "[Ar] 3d1 4s2"},
    TabulatedConfiguration{21, 1, "[Ar] 3d1 4s1"},
    TabulatedConfiguration{22, 0, "[Ar] 3d2 4s2"},
    TabulatedConfiguration{22, 1, "[Ar] 3d2 4s1"},
    TabulatedConfiguration{23, 0, "[Ar] 3d3 4s2"},
    TabulatedConfiguration{23, 1, "[Ar] 3d4"},
    TabulatedConfiguration{24, 0, "[Ar] 3d5 4s1"},
    TabulatedConfiguration{24, 1, "[Ar] 3d5"},
    TabulatedConfiguration{25, 0, "[Ar] 3d5 4s2"},
    TabulatedConfiguration{25, 1, "[Ar] 3d5 4s1"},
    TabulatedConfiguration{26, 0, "[Ar] 3d6 4s2"},
    TabulatedConfiguration{26, 1, "[Ar] 3d6 4s1"},
    TabulatedConfiguration{27, 0, "[Ar] 3d7 4s2"},
    TabulatedConfiguration{27, 1, "[Ar] 3d8"},
    TabulatedConfiguration{28, 0, "[Ar] 3d8 4s2"},
    TabulatedConfiguration{28, 1, "[Ar] 3d9"},
    TabulatedConfiguration{29, 0, "[Ar] 3d10 4s1"},
    TabulatedConfiguration{29, 1, "[Ar] 3d10"},
    TabulatedConfiguration{30, 0, "[Ar] 3d10 4s2"},
    TabulatedConfiguration{30, 1, "[Ar] 3d10 4s1"},
    TabulatedConfiguration{31, 0, "[Ar] 3d10 4s2 4p1"},
    TabulatedConfiguration{31, 1, "[Ar] 3d10 4s2"},
    TabulatedConfiguration{32, 0, "[Ar] 3d10 4s2 4p2"},
    TabulatedConfiguration{32, 1, "[Ar] 3d10 4s2 4p1"},
    TabulatedConfiguration{33, 0, "[Ar] 3d10 4s2 4p3"},
    TabulatedConfiguration{33, 1, "[Ar] 3d10 4s2 4p2"},
    TabulatedConfiguration{34, 0, "[Ar] 3d10 4s2 4p4"},
    TabulatedConfiguration{34, 1, "[Ar] 3d10 4s2 4p3"},
    TabulatedConfiguration{35, 0, "[Ar] 3d10 4s2 4p5"},
    TabulatedConfiguration{35, 1, "[Ar] 3d10 4s2 4p4"},
    TabulatedConfiguration{36, 0, "[Ar] 3d10 4s2 4p6"},
    TabulatedConfiguration{36, 1, "[Ar] 3d10 4s2 4p5"},
    TabulatedConfiguration{37, 0, "[Kr] 5s1"},
    TabulatedConfiguration{37, 1, "[Ar] 3d10 4s2 4p6"},
    TabulatedConfiguration{38, 0, "[Kr] 5s2"},
    TabulatedConfiguration{38, 1, "[Kr] 5s1"},
    TabulatedConfiguration{39, 0, "[Kr] 4d1 5s2"},
    // Y+ is missing from the stored excerpt of the NIST page; standard value.
    TabulatedConfiguration{39, 1, "[Kr] 5s2"},
    // Z = 40..54: standard experimental ground configurations, not taken from the NIST page.
    TabulatedConfiguration{40, 0, "[Kr] 4d2 5s2"},
    TabulatedConfiguration{40, 1, "[Kr] 4d2 5s1"},
    TabulatedConfiguration{41, 0, "[Kr] 4d4 5s1"},
    TabulatedConfiguration{41, 1, "[Kr] 4d4"},
    TabulatedConfiguration{42, 0, "[Kr] 4d5 5s1"},
    TabulatedConfiguration{42, 1, "[Kr] 4d5"},
    TabulatedConfiguration{43, 0, "[Kr] 4d5 5s2"},
    TabulatedConfiguration{43, 1, "[Kr] 4d5 5s1"},
    TabulatedConfiguration{44, 0, "[Kr] 4d7 5s1"},
    TabulatedConfiguration{44, 1, "[Kr] 4d7"},
    TabulatedConfiguration{45, 0, "[Kr] 4d8 5s1"},
    TabulatedConfiguration{45, 1, "[Kr] 4d8"},
    TabulatedConfiguration{46, 0, "[Kr] 4d10"},
    TabulatedConfiguration{46, 1, "[Kr] 4d9"},
    TabulatedConfiguration{47, 0, "[Kr] 4d10 5s1"},
    TabulatedConfiguration{47, 1, "[Kr] 4d10"},
    TabulatedConfiguration{48, 0, "[Kr] 4d10 5s2"},
    TabulatedConfiguration{48, 1, "[Kr] 4d10 5s1"},
    TabulatedConfiguration{49, 0, "[Kr] 4d10 5s2 5p1"},
    TabulatedConfiguration{49, 1, "[Kr] 4d10 5s2"},
    TabulatedConfiguration{50, 0, "[Kr] 4d10 5s2 5p2"},
    TabulatedConfiguration{50, 1, "[Kr] 4d10 5s2 5p1"},
    TabulatedConfiguration{51, 0, "[Kr] 4d10 5s2 5p3"},
    TabulatedConfiguration{51, 1, "[Kr] 4d10 5s2 5p2"},
    TabulatedConfiguration{52, 0, "[Kr] 4d10 5s2 5p4"},
    TabulatedConfiguration{52, 1, "[Kr] 4d10 5s2 5p3"},
    TabulatedConfiguration{53, 0, "[Kr] 4d10 5s2 5p5"},
    TabulatedConfiguration{53, 1, "[Kr] 4d10 5s2 5p4"},
    TabulatedConfiguration{54, 0, "[Kr] 4d10 5s2 5p6"},
    TabulatedConfiguration{54, 1, "[Kr] 4d10 5s2 5p5"},
};

constexpr std::string_view kLetters = "spdfg";

struct ShellId {
  int n;
  int l;
};

// Cores are nested, so one list with cumulative lengths describes all of them.
constexpr std::array<ShellId, 15> kCoreShells = {{{1, 0},
                                                  {2, 0},
                                                  {2, 1},
                                                  {3, 0},
                                                  {3, 1},
                                                  {3, 2},
                                                  {4, 0},
                                                  {4, 1},
                                                  {4, 2},
                                                  {5, 0},
                                                  {5, 1},
                                                  {4, 3},
                                                  {5, 2},
                                                  {6, 0},
                                                  {6, 1}}};

struct Core {
  std::string_view name;
  std::size_t shell_count;
};

constexpr std::array<Core, 6> kCores = {
    {{"He", 1}, {"Ne", 3}, {"Ar", 5}, {"Kr", 8}, {"Xe", 11}, {"Rn", 15}}};

// Elements stop at 118, and the Madelung sequence through 8s holds exactly 120 electrons;
// going further would mean inventing g-shell chemistry.
constexpr int kMaxAufbauElectrons = 120;

constexpr double capacity(int l) { return 2.0 * (2 * l + 1); }

bool is_space(char c) { return std::isspace(static_cast<unsigned char>(c)) != 0; }
bool is_digit(char c) { return c >= '0' && c <= '9'; }

std::string_view trim(std::string_view s) {
  while (!s.empty() && is_space(s.front())) s.remove_prefix(1);
  while (!s.empty() && is_space(s.back())) s.remove_suffix(1);
  return s;
}

std::string shell_name(int n, int l) {
  return std::to_string(n) + kLetters[static_cast<std::size_t>(l)];
}

// Element symbols are written with one capital; users type them in any case.
std::string canonical_symbol_case(std::string_view s) {
  std::string out(s);
  for (std::size_t i = 0; i < out.size(); ++i) {
    const auto c = static_cast<unsigned char>(out[i]);
    out[i] = static_cast<char>(i == 0 ? std::toupper(c) : std::tolower(c));
  }
  return out;
}

bool location_known(const SourceLocation& w) {
  return !w.file.empty() || w.line > 0 || w.column > 0 || !w.key.empty();
}

[[noreturn]] void throw_at(const SourceLocation& where, const std::string& message) {
  if (location_known(where)) throw InputError(where, message);
  throw InputError(message);
}

std::string format_number(double x) {
  if (x == 0.0) return "0";  // also hides the sign of -0.0, which would not parse back
  // Fixed notation because the parser deliberately accepts no exponents.
  std::array<char, 512> buf{};
  const auto r = std::to_chars(buf.data(), buf.data() + buf.size(), x, std::chars_format::fixed);
  if (r.ec != std::errc{}) return std::to_string(x);
  return std::string(buf.data(), r.ptr);
}

class ConfigurationParser {
 public:
  ConfigurationParser(std::string_view text, const SourceLocation& where)
      : text_(text), where_(where) {}

  std::vector<Subshell> run() {
    std::size_t i = 0;
    bool any = false;
    while (i < text_.size()) {
      if (is_space(text_[i])) {
        ++i;
        continue;
      }
      std::size_t end = i;
      while (end < text_.size() && !is_space(text_[end])) ++end;
      token(text_.substr(i, end - i), static_cast<int>(i) + 1);
      any = true;
      i = end;
    }
    if (!any) {
      SourceLocation loc = located(1);
      throw InputError(loc, "electron configuration is empty at column 1; expected e.g. \"[Ne] 3s2 3p1\"");
    }
    std::vector<Subshell> out;
    out.reserve(shells_.size());
    for (const auto& [id, entry] : shells_) out.push_back({id.first, id.second, entry.occupation});
    return out;
  }

 private:
  struct Entry {
    double occupation;
    int column;
    std::string_view core;  // empty when written out explicitly
  };

  SourceLocation located(int column) const {
    SourceLocation loc = where_;
    loc.column = where_.column > 0 ? where_.column + column - 1 : column;
    return loc;
  }

  [[noreturn]] void fail(int column, std::string_view tok, const std::string& reason) const {
    throw InputError(located(column), "'" + std::string(tok) + "' at column " +
                                          std::to_string(column) + " of configuration \"" +
                                          std::string(text_) + "\": " + reason);
  }

  void token(std::string_view tok, int column) {
    if (tok.front() != '[') {
      subshell(tok, column);
      return;
    }
    const std::size_t close = tok.find(']');
    if (close == std::string_view::npos) fail(column, tok, "core is missing its closing ']'");
    const std::string_view core_tok = tok.substr(0, close + 1);
    const std::string name = canonical_symbol_case(tok.substr(1, close - 1));
    const auto core = std::find_if(kCores.begin(), kCores.end(),
                                   [&](const Core& c) { return c.name == name; });
    if (core == kCores.end()) {
      std::vector<std::string> names;
      for (const auto& c : kCores) names.emplace_back(c.name);
      const std::string guess = nearest_word(name, names);
      fail(column, core_tok,
           "unknown core; known cores are [He] [Ne] [Ar] [Kr] [Xe] [Rn]" +
               (guess.empty() ? std::string() : "; did you mean [" + guess + "]?"));
    }
    for (std::size_t k = 0; k < core->shell_count; ++k) {
      const ShellId s = kCoreShells[k];
      if (const auto* prior = find(s.n, s.l)) {
        fail(column, core_tok,
             "overlapping shells: the [" + std::string(core->name) + "] core contains " +
                 shell_name(s.n, s.l) + ", which is already " + describe(*prior));
      }
      shells_[{s.n, s.l}] = Entry{capacity(s.l), column, core->name};
    }
    // "[Ne]3s2": the first subshell may follow the core without a space.
    if (close + 1 < tok.size()) subshell(tok.substr(close + 1), column + static_cast<int>(close) + 1);
  }

  void subshell(std::string_view tok, int column) {
    const auto unknown = [&] {
      fail(column, tok, "unknown token; expected a subshell such as 3p2 or a core such as [Ne]");
    };
    std::size_t pos = 0;
    while (pos < tok.size() && is_digit(tok[pos])) ++pos;
    if (pos == 0 || pos == tok.size()) unknown();
    int n = 0;
    const auto nr = std::from_chars(tok.data(), tok.data() + pos, n);
    if (nr.ec != std::errc{} || n > 99) fail(column, tok, "principal quantum number is too large");
    if (n < 1) fail(column, tok, "principal quantum number must be at least 1");

    const char letter = static_cast<char>(std::tolower(static_cast<unsigned char>(tok[pos])));
    const std::size_t l_index = kLetters.find(letter);
    if (l_index == std::string_view::npos) {
      if (std::isalpha(static_cast<unsigned char>(letter)) != 0)
        fail(column, tok, std::string("unknown angular momentum letter '") + tok[pos] +
                              "'; use s, p, d, f or g");
      unknown();
    }
    const int l = static_cast<int>(l_index);
    ++pos;
    if (l >= n) {
      fail(column, tok, "l must be smaller than n: a " + std::string(1, kLetters[l_index]) +
                            " subshell needs n >= " + std::to_string(l + 1));
    }

    std::string_view occ = tok.substr(pos);
    if (occ.empty()) fail(column, tok, "missing occupation, e.g. " + shell_name(n, l) + "2");
    const bool negative = occ.front() == '-';
    if (negative) occ.remove_prefix(1);
    const bool digits_and_one_dot =
        std::any_of(occ.begin(), occ.end(), is_digit) &&
        std::all_of(occ.begin(), occ.end(), [](char c) { return is_digit(c) || c == '.'; }) &&
        std::count(occ.begin(), occ.end(), '.') <= 1;
    if (!digits_and_one_dot) unknown();
    double value = 0.0;
    const auto vr = std::from_chars(occ.data(), occ.data() + occ.size(), value, std::chars_format::fixed);
    if (vr.ec != std::errc{} || vr.ptr != occ.data() + occ.size() || !std::isfinite(value)) unknown();
    if (negative && value > 0.0) fail(column, tok, "occupation must not be negative");
    if (value > capacity(l)) {
      fail(column, tok, "a " + std::string(1, kLetters[l_index]) + " subshell holds at most " +
                            format_number(capacity(l)) + " electrons");
    }

    if (const auto* prior = find(n, l)) {
      fail(column, tok, "overlapping shells: " + shell_name(n, l) + " is already " + describe(*prior));
    }
    shells_[{n, l}] = Entry{value, column, {}};
  }

  const Entry* find(int n, int l) const {
    const auto it = shells_.find({n, l});
    return it == shells_.end() ? nullptr : &it->second;
  }

  static std::string describe(const Entry& e) {
    if (!e.core.empty())
      return "part of the [" + std::string(e.core) + "] core at column " + std::to_string(e.column);
    return "given at column " + std::to_string(e.column);
  }

  std::string_view text_;
  const SourceLocation& where_;
  std::map<std::pair<int, int>, Entry> shells_;
};

// Writes the shells with the largest noble-gas core that still leaves something outside it,
// which is how the tabulated entries are spelt (Na+ is "[He] 2s2 2p6", not "[Ne]").
std::string format_with_core(const std::vector<Subshell>& sorted) {
  const auto full = [&](ShellId s) {
    return std::any_of(sorted.begin(), sorted.end(), [&](const Subshell& x) {
      return x.n == s.n && x.l == s.l && x.occupation == capacity(s.l);
    });
  };
  for (auto core = kCores.rbegin(); core != kCores.rend(); ++core) {
    if (sorted.size() <= core->shell_count) continue;
    if (!std::all_of(kCoreShells.begin(), kCoreShells.begin() + static_cast<std::ptrdiff_t>(core->shell_count), full))
      continue;
    std::vector<Subshell> rest;
    for (const auto& s : sorted) {
      const bool in_core =
          std::any_of(kCoreShells.begin(), kCoreShells.begin() + static_cast<std::ptrdiff_t>(core->shell_count),
                      [&](ShellId c) { return c.n == s.n && c.l == s.l; });
      if (!in_core) rest.push_back(s);
    }
    std::string out("[");  // append, not operator+: GCC 12 warns falsely (-Wrestrict)
    out.append(core->name).append("] ").append(format_configuration(rest));
    return out;
  }
  return format_configuration(sorted);
}

std::vector<Subshell> madelung_filling(int electrons) {
  std::vector<Subshell> shells;
  int left = electrons;
  for (int sum = 1; left > 0; ++sum) {
    // Within one n + l the lower n fills first, i.e. the higher l.
    for (int l = (sum - 1) / 2; l >= 0 && left > 0; --l) {
      const int put = std::min(left, static_cast<int>(capacity(l)));
      shells.push_back({sum - l, l, static_cast<double>(put)});
      left -= put;
    }
  }
  std::sort(shells.begin(), shells.end(), [](const Subshell& a, const Subshell& b) {
    return std::pair(a.n, a.l) < std::pair(b.n, b.l);
  });
  return shells;
}

}  // namespace

int atomic_number(std::string_view symbol_or_number, const SourceLocation& where) {
  const std::string_view s = trim(symbol_or_number);
  if (s.empty()) throw_at(where, "element is empty; give a symbol such as \"Mg\" or a number such as 12");
  if (std::all_of(s.begin(), s.end(), is_digit)) {
    int Z = 0;
    const auto r = std::from_chars(s.data(), s.data() + s.size(), Z);
    if (r.ec != std::errc{} || Z < 1 || Z > 118)
      throw_at(where, "atomic number " + std::string(s) + " is outside 1..118");
    return Z;
  }
  const std::string wanted = canonical_symbol_case(s);
  for (std::size_t i = 0; i < kSymbols.size(); ++i)
    if (kSymbols[i] == wanted) return static_cast<int>(i) + 1;
  const std::vector<std::string> candidates(kSymbols.begin(), kSymbols.end());
  const std::string guess = nearest_word(std::string(s), candidates);
  throw_at(where, "unknown element '" + std::string(s) + "'" +
                      (guess.empty() ? std::string() : "; did you mean '" + guess + "'?"));
}

std::string element_symbol(int Z) {
  if (Z < 1 || Z > 118) throw InputError("atomic number " + std::to_string(Z) + " is outside 1..118");
  return std::string(kSymbols[static_cast<std::size_t>(Z - 1)]);
}

std::vector<Subshell> parse_configuration(std::string_view text, const SourceLocation& where) {
  return ConfigurationParser(text, where).run();
}

std::string default_configuration(int Z, int charge, const SourceLocation& where) {
  if (Z < 1 || Z > 118) throw_at(where, "atomic number " + std::to_string(Z) + " is outside 1..118");
  const long long electrons = static_cast<long long>(Z) - charge;
  const std::string what = element_symbol(Z) + " with charge " + std::to_string(charge);
  if (electrons <= 0) throw_at(where, what + " has no electrons");
  // Lieb's bound: a nucleus of charge Z binds fewer than 2Z + 1 electrons.
  if (electrons > 2LL * Z)
    throw_at(where, what + " would have " + std::to_string(electrons) +
                        " electrons, more than the 2Z a nucleus can bind");
  if (electrons > kMaxAufbauElectrons)
    throw_at(where, what + " would have " + std::to_string(electrons) +
                        " electrons; default configurations stop at " +
                        std::to_string(kMaxAufbauElectrons) + ", give one explicitly");
  for (const auto& row : kGroundTable)
    if (row.Z == Z && row.charge == charge) return std::string(row.configuration);
  return format_with_core(madelung_filling(static_cast<int>(electrons)));
}

std::span<const TabulatedConfiguration> ground_configuration_table() { return kGroundTable; }

double electron_count(const std::vector<Subshell>& shells) {
  double total = 0.0;
  for (const auto& s : shells) total += s.occupation;
  return total;
}

std::vector<SpinSubshell> split_spins_hund(const std::vector<Subshell>& shells) {
  std::vector<SpinSubshell> out;
  out.reserve(shells.size());
  for (const auto& s : shells) {
    const double majority = std::min(s.occupation, static_cast<double>(2 * s.l + 1));
    out.push_back({s.n, s.l, majority, s.occupation - majority});
  }
  return out;
}

std::string format_configuration(const std::vector<Subshell>& shells) {
  std::string out;
  for (const auto& s : shells) {
    if (s.l < 0 || s.l >= static_cast<int>(kLetters.size()))
      throw InputError("subshell with l = " + std::to_string(s.l) + " has no letter (s p d f g only)");
    if (!out.empty()) out += ' ';
    out += std::to_string(s.n);
    out += kLetters[static_cast<std::size_t>(s.l)];
    out += format_number(s.occupation);
  }
  return out;
}

}  // namespace stillpoint
