#include "stillpoint/ks/atom_config.hpp"

#include <gtest/gtest.h>

#include <filesystem>
#include <functional>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

namespace sp = stillpoint;

namespace {

// Returns the InputError message, failing the test if nothing (or something else) is thrown.
std::string input_error_message(const std::function<void()>& f) {
  try {
    f();
  } catch (const sp::InputError& e) {
    return e.what();
  }
  ADD_FAILURE() << "expected InputError";
  return {};
}

std::string parse_error(std::string_view text) {
  return input_error_message([&] { sp::parse_configuration(text); });
}

struct CsvRow {
  int Z;
  std::string symbol;
  int charge;
  std::string configuration;
  friend bool operator==(const CsvRow&, const CsvRow&) = default;
};

std::ostream& operator<<(std::ostream& os, const CsvRow& r) {
  return os << r.Z << "," << r.symbol << "," << r.charge << "," << r.configuration;
}

std::vector<CsvRow> read_configuration_csv(const std::filesystem::path& path) {
  std::ifstream in(path);
  EXPECT_TRUE(in) << "cannot open " << path;
  std::vector<CsvRow> rows;
  std::string line;
  bool header_seen = false;
  while (std::getline(in, line)) {
    if (line.empty() || line.front() == '#') continue;
    if (!header_seen) {
      EXPECT_EQ(line, "Z,symbol,charge,configuration");
      header_seen = true;
      continue;
    }
    std::stringstream ss(line);
    std::string z, symbol, charge, config;
    std::getline(ss, z, ',');
    std::getline(ss, symbol, ',');
    std::getline(ss, charge, ',');
    std::getline(ss, config);
    rows.push_back({std::stoi(z), symbol, std::stoi(charge), config});
  }
  return rows;
}

// NIST SRD 141 ground configurations (Z = 1..39, neutral atoms and cations, Y+ absent),
// https://www.nist.gov/pml/atomic-reference-data-electronic-structure-calculations/atomic-reference-data-electronic-8
// Kept here as an independent copy so a slip in the library table cannot hide in both places.
// Spelling as on the page, including "[Ne]3s2" for S, which the parser must accept.
const std::vector<CsvRow> kNistRows = {
    {1, "H", 0, "1s1"},
    {2, "He", 0, "1s2"},
    {2, "He", 1, "1s1"},
    {3, "Li", 0, "[He] 2s1"},
    {3, "Li", 1, "1s2"},
    {4, "Be", 0, "[He] 2s2"},
    {4, "Be", 1, "[He] 2s1"},
    {5, "B", 0, "[He] 2s2 2p1"},
    {5, "B", 1, "[He] 2s2"},
    {6, "C", 0, "[He] 2s2 2p2"},
    {6, "C", 1, "[He] 2s2 2p1"},
    {7, "N", 0, "[He] 2s2 2p3"},
    {7, "N", 1, "[He] 2s2 2p2"},
    {8, "O", 0, "[He] 2s2 2p4"},
    {8, "O", 1, "[He] 2s2 2p3"},
    {9, "F", 0, "[He] 2s2 2p5"},
    {9, "F", 1, "[He] 2s2 2p4"},
    {10, "Ne", 0, "[He] 2s2 2p6"},
    {10, "Ne", 1, "[He] 2s2 2p5"},
    {11, "Na", 0, "[Ne] 3s1"},
    {11, "Na", 1, "[He] 2s2 2p6"},
    {12, "Mg", 0, "[Ne] 3s2"},
    {12, "Mg", 1, "[Ne] 3s1"},
    {13, "Al", 0, "[Ne] 3s2 3p1"},
    {13, "Al", 1, "[Ne] 3s2"},
    {14, "Si", 0, "[Ne] 3s2 3p2"},
    {14, "Si", 1, "[Ne] 3s2 3p1"},
    {15, "P", 0, "[Ne] 3s2 3p3"},
    {15, "P", 1, "[Ne] 3s2 3p2"},
    {16, "S", 0, "[Ne]3s2 3p4"},
    {16, "S", 1, "[Ne] 3s2 3p3"},
    {17, "Cl", 0, "[Ne] 3s2 3p5"},
    {17, "Cl", 1, "[Ne] 3s2 3p4"},
    {18, "Ar", 0, "[Ne] 3s2 3p6"},
    {18, "Ar", 1, "[Ne] 3s2 3p5"},
    {19, "K", 0, "[Ar] 4s1"},
    {19, "K", 1, "[Ne] 3s2 3p6"},
    {20, "Ca", 0, "[Ar] 4s2"},
    {20, "Ca", 1, "[Ar] 4s1"},
    {21, "Sc", 0, "[Ar] 3d1 4s2"},
    {21, "Sc", 1, "[Ar] 3d1 4s1"},
    {22, "Ti", 0, "[Ar] 3d2 4s2"},
    {22, "Ti", 1, "[Ar] 3d2 4s1"},
    {23, "V", 0, "[Ar] 3d3 4s2"},
    {23, "V", 1, "[Ar] 3d4"},
    {24, "Cr", 0, "[Ar] 3d5 4s1"},
    {24, "Cr", 1, "[Ar] 3d5"},
    {25, "Mn", 0, "[Ar] 3d5 4s2"},
    {25, "Mn", 1, "[Ar] 3d5 4s1"},
    {26, "Fe", 0, "[Ar] 3d6 4s2"},
    {26, "Fe", 1, "[Ar] 3d6 4s1"},
    {27, "Co", 0, "[Ar] 3d7 4s2"},
    {27, "Co", 1, "[Ar] 3d8"},
    {28, "Ni", 0, "[Ar] 3d8 4s2"},
    {28, "Ni", 1, "[Ar] 3d9"},
    {29, "Cu", 0, "[Ar] 3d10 4s1"},
    {29, "Cu", 1, "[Ar] 3d10"},
    {30, "Zn", 0, "[Ar] 3d10 4s2"},
    {30, "Zn", 1, "[Ar] 3d10 4s1"},
    {31, "Ga", 0, "[Ar] 3d10 4s2 4p1"},
    {31, "Ga", 1, "[Ar] 3d10 4s2"},
    {32, "Ge", 0, "[Ar] 3d10 4s2 4p2"},
    {32, "Ge", 1, "[Ar] 3d10 4s2 4p1"},
    {33, "As", 0, "[Ar] 3d10 4s2 4p3"},
    {33, "As", 1, "[Ar] 3d10 4s2 4p2"},
    {34, "Se", 0, "[Ar] 3d10 4s2 4p4"},
    {34, "Se", 1, "[Ar] 3d10 4s2 4p3"},
    {35, "Br", 0, "[Ar] 3d10 4s2 4p5"},
    {35, "Br", 1, "[Ar] 3d10 4s2 4p4"},
    {36, "Kr", 0, "[Ar] 3d10 4s2 4p6"},
    {36, "Kr", 1, "[Ar] 3d10 4s2 4p5"},
    {37, "Rb", 0, "[Kr] 5s1"},
    {37, "Rb", 1, "[Ar] 3d10 4s2 4p6"},
    {38, "Sr", 0, "[Kr] 5s2"},
    {38, "Sr", 1, "[Kr] 5s1"},
    {39, "Y", 0, "[Kr] 4d1 5s2"},
};

}  // namespace

TEST(AtomConfig, ParsesExplicitShells) {
  const auto shells = sp::parse_configuration("1s2 2s2 2p6");
  const std::vector<sp::Subshell> expected = {{1, 0, 2.0}, {2, 0, 2.0}, {2, 1, 6.0}};
  EXPECT_EQ(shells, expected);
}

TEST(AtomConfig, ParsesNobleGasCore) {
  const auto shells = sp::parse_configuration("[Ne] 3s2 3p1");
  const std::vector<sp::Subshell> expected = {
      {1, 0, 2.0}, {2, 0, 2.0}, {2, 1, 6.0}, {3, 0, 2.0}, {3, 1, 1.0}};
  EXPECT_EQ(shells, expected);
}

TEST(AtomConfig, ParsesCoreWithoutSpace) {
  EXPECT_EQ(sp::parse_configuration("[Ne]3s2 3p4"), sp::parse_configuration("[Ne] 3s2 3p4"));
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[Ne]3s2 3p4")), 16.0);
}

TEST(AtomConfig, ParsesTransitionMetalAndSortsByNThenL) {
  const auto shells = sp::parse_configuration("[Ar] 4p1 4s2 3d10");
  EXPECT_DOUBLE_EQ(sp::electron_count(shells), 31.0);
  EXPECT_EQ(sp::format_configuration(shells), "1s2 2s2 2p6 3s2 3p6 3d10 4s2 4p1");
  EXPECT_EQ(shells, sp::parse_configuration("[Ar] 3d10 4s2 4p1"));
}

TEST(AtomConfig, EveryCoreHasItsNobleGasElectronCount) {
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[He]")), 2.0);
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[Ne]")), 10.0);
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[Ar]")), 18.0);
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[Kr]")), 36.0);
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[Xe]")), 54.0);
  EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration("[Rn]")), 86.0);
  EXPECT_EQ(sp::parse_configuration("[Rn]").size(), 15u);
}

TEST(AtomConfig, ParsesFractionalAndZeroOccupations) {
  const auto half = sp::parse_configuration("[He] 2s2 2p0.5");
  EXPECT_DOUBLE_EQ(half.back().occupation, 0.5);
  EXPECT_DOUBLE_EQ(sp::electron_count(half), 4.5);
  EXPECT_DOUBLE_EQ(sp::parse_configuration("2p1.5").front().occupation, 1.5);

  const auto empty_3s = sp::parse_configuration("[Ne] 3s0");
  ASSERT_EQ(empty_3s.size(), 4u);
  EXPECT_EQ(empty_3s.back(), (sp::Subshell{3, 0, 0.0}));
}

TEST(AtomConfig, AcceptsUppercaseAndExtraWhitespace) {
  EXPECT_EQ(sp::parse_configuration("  [ne]\t3S2   3P1 "), sp::parse_configuration("[Ne] 3s2 3p1"));
  EXPECT_EQ(sp::parse_configuration("5g18").front(), (sp::Subshell{5, 4, 18.0}));
}

TEST(AtomConfig, FormatUsesCompactNumbers) {
  const std::vector<sp::Subshell> shells = {{1, 0, 2.0}, {2, 0, 2.0}, {2, 1, 6.0}, {3, 0, 1.0}};
  EXPECT_EQ(sp::format_configuration(shells), "1s2 2s2 2p6 3s1");
  EXPECT_EQ(sp::format_configuration({{2, 1, 0.5}}), "2p0.5");
  EXPECT_EQ(sp::format_configuration({{3, 2, 0.0}}), "3d0");
  EXPECT_EQ(sp::format_configuration({{4, 3, 13.25}}), "4f13.25");
  EXPECT_EQ(sp::format_configuration({}), "");
  EXPECT_THROW(sp::format_configuration({{6, 5, 1.0}}), sp::InputError);
}

TEST(AtomConfig, FormatParseRoundTrips) {
  for (const std::string text :
       {"1s2 2s2 2p6 3s1", "1s1", "1s2 2s2 2p0.5", "1s2 2s1.5 2p1.5", "1s2 2s2 2p6 3s0",
        "1s2 2s2 2p6 3s2 3p6 3d10 4s2 4p1", "1s2 2s2 2p6 3s2 3p6 3d6.25 4s1.75"}) {
    EXPECT_EQ(sp::format_configuration(sp::parse_configuration(text)), text);
  }
  const std::vector<sp::Subshell> thirds = {{1, 0, 2.0}, {2, 0, 2.0}, {2, 1, 4.0 / 3.0}};
  EXPECT_EQ(sp::parse_configuration(sp::format_configuration(thirds)), thirds);
  for (int Z = 1; Z <= 118; ++Z) {
    const auto shells = sp::parse_configuration(sp::default_configuration(Z, 0));
    EXPECT_EQ(sp::parse_configuration(sp::format_configuration(shells)), shells) << "Z=" << Z;
  }
}

TEST(AtomConfig, DefaultConfigurationsHaveTheRightElectronCount) {
  for (int Z = 1; Z <= 54; ++Z) {
    for (int charge : {0, 1}) {
      if (Z - charge == 0) continue;
      const std::string config = sp::default_configuration(Z, charge);
      EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration(config)), Z - charge)
          << "Z=" << Z << " charge=" << charge << ": " << config;
    }
  }
  // Outside the table the Madelung filling must still count right.
  for (int Z = 1; Z <= 118; ++Z) {
    for (int charge : {-1, 0, 1, 2, 3}) {
      const int electrons = Z - charge;
      if (electrons <= 0 || electrons > 2 * Z) continue;
      EXPECT_DOUBLE_EQ(sp::electron_count(sp::parse_configuration(sp::default_configuration(Z, charge))),
                       electrons)
          << "Z=" << Z << " charge=" << charge;
    }
  }
}

TEST(AtomConfig, NistRowsMatchTheSourceTable) {
  for (const auto& row : kNistRows) {
    EXPECT_EQ(sp::element_symbol(row.Z), row.symbol);
    const std::string ours = sp::default_configuration(row.Z, row.charge);
    EXPECT_EQ(sp::parse_configuration(ours), sp::parse_configuration(row.configuration)) << row;
  }
  // Normalised spelling: exactly one blank after the core.
  EXPECT_EQ(sp::default_configuration(16, 0), "[Ne] 3s2 3p4");
}

TEST(AtomConfig, NistRowsMatchTheShippedReferenceFile) {
  const std::filesystem::path path = std::filesystem::path(STILLPOINT_REFERENCE_DIR) / "nist-configurations.csv";
  ASSERT_TRUE(std::filesystem::exists(path)) << path << " is missing from the repository";
  EXPECT_EQ(read_configuration_csv(path), kNistRows);
}

TEST(AtomConfig, CompiledTableMatchesCsv) {
  const auto csv = read_configuration_csv(std::filesystem::path(STILLPOINT_SOURCE_DIR) /
                                          "basis-data" / "ground-configurations.csv");
  const auto table = sp::ground_configuration_table();
  ASSERT_EQ(csv.size(), table.size());
  for (std::size_t i = 0; i < csv.size(); ++i) {
    const CsvRow compiled{table[i].Z, sp::element_symbol(table[i].Z), table[i].charge,
                          std::string(table[i].configuration)};
    EXPECT_EQ(csv[i], compiled) << "row " << i;
    EXPECT_EQ(sp::default_configuration(table[i].Z, table[i].charge), table[i].configuration);
  }
}

TEST(AtomConfig, TableCoversNeutralsAndCationsUpToXenon) {
  const auto table = sp::ground_configuration_table();
  // Z = 1..54 neutral and cation, without the bare proton.
  EXPECT_EQ(table.size(), 2u * 54u - 1u);
  for (std::size_t i = 1; i < table.size(); ++i) {
    EXPECT_LT(std::pair(table[i - 1].Z, table[i - 1].charge), std::pair(table[i].Z, table[i].charge));
  }
  EXPECT_EQ(sp::default_configuration(39, 1), "[Kr] 5s2");
  EXPECT_EQ(sp::default_configuration(46, 0), "[Kr] 4d10");
  EXPECT_EQ(sp::default_configuration(46, 1), "[Kr] 4d9");
  EXPECT_EQ(sp::default_configuration(54, 0), "[Kr] 4d10 5s2 5p6");
}

TEST(AtomConfig, FallsBackToMadelungFilling) {
  EXPECT_EQ(sp::default_configuration(26, 2), "[Ar] 3d4 4s2");
  EXPECT_EQ(sp::default_configuration(17, -1), "[Ne] 3s2 3p6");
  EXPECT_EQ(sp::default_configuration(1, -1), "1s2");
  EXPECT_EQ(sp::default_configuration(12, 2), "[He] 2s2 2p6");
  EXPECT_EQ(sp::default_configuration(55, 0), "[Xe] 6s1");
  EXPECT_EQ(sp::default_configuration(57, 0), "[Xe] 4f1 6s2");
  EXPECT_EQ(sp::default_configuration(118, 0), "[Rn] 5f14 6d10 7s2 7p6");
}

TEST(AtomConfig, DefaultConfigurationRejectsImpossibleIons) {
  EXPECT_THROW(sp::default_configuration(1, 1), sp::InputError);
  EXPECT_THROW(sp::default_configuration(6, 7), sp::InputError);
  EXPECT_THROW(sp::default_configuration(0, 0), sp::InputError);
  EXPECT_THROW(sp::default_configuration(119, 0), sp::InputError);
  EXPECT_THROW(sp::default_configuration(1, -2), sp::InputError);
  EXPECT_THROW(sp::default_configuration(118, -3), sp::InputError);
  sp::SourceLocation where;
  where.file = "atom.toml";
  where.line = 4;
  where.key = "atom.charge";
  const std::string msg = input_error_message([&] { sp::default_configuration(1, 1, where); });
  EXPECT_NE(msg.find("atom.toml:4"), std::string::npos) << msg;
  EXPECT_NE(msg.find("atom.charge"), std::string::npos) << msg;
}

TEST(AtomConfig, HundSplitFillsMajorityFirst) {
  const auto split = [](std::string_view text) { return sp::split_spins_hund(sp::parse_configuration(text)).front(); };
  EXPECT_EQ(split("2p3"), (sp::SpinSubshell{2, 1, 3.0, 0.0}));
  EXPECT_EQ(split("2p4"), (sp::SpinSubshell{2, 1, 3.0, 1.0}));
  EXPECT_EQ(split("3d7"), (sp::SpinSubshell{3, 2, 5.0, 2.0}));
  EXPECT_EQ(split("2p0.5"), (sp::SpinSubshell{2, 1, 0.5, 0.0}));
  EXPECT_EQ(split("1s2"), (sp::SpinSubshell{1, 0, 1.0, 1.0}));
  EXPECT_EQ(sp::split_spins_hund(sp::parse_configuration("[Ar] 3d10 4s2 4p1")).size(), 8u);
}

TEST(AtomConfig, RejectsUnknownToken) {
  const std::string msg = parse_error("[Ne] 3s2 3x1");
  EXPECT_NE(msg.find("'3x1'"), std::string::npos) << msg;
  EXPECT_NE(msg.find("column 10"), std::string::npos) << msg;
  for (const char* bad : {"3s2,", "foo", "3s", "s2", "[Ne 3s2", "[Qq] 3s2", "3s23p1", "3s2.0.5", "3sx"}) {
    EXPECT_THROW(sp::parse_configuration(bad), sp::InputError) << bad;
  }
  const std::string core = parse_error("1s2 [Nr] 3s1");
  EXPECT_NE(core.find("'[Nr]'"), std::string::npos) << core;
  EXPECT_NE(core.find("column 5"), std::string::npos) << core;
}

TEST(AtomConfig, RejectsLNotBelowN) {
  const std::string msg = parse_error("1s2 2d1");
  EXPECT_NE(msg.find("'2d1'"), std::string::npos) << msg;
  EXPECT_NE(msg.find("column 5"), std::string::npos) << msg;
  EXPECT_THROW(sp::parse_configuration("1p1"), sp::InputError);
  EXPECT_THROW(sp::parse_configuration("0s1"), sp::InputError);
}

TEST(AtomConfig, RejectsOccupationOutOfRange) {
  const std::string too_many = parse_error("[He] 2s2 2p7");
  EXPECT_NE(too_many.find("'2p7'"), std::string::npos) << too_many;
  EXPECT_NE(too_many.find("column 10"), std::string::npos) << too_many;
  EXPECT_NE(too_many.find("at most 6"), std::string::npos) << too_many;
  EXPECT_THROW(sp::parse_configuration("3d10.5"), sp::InputError);
  EXPECT_NO_THROW(sp::parse_configuration("3d10"));

  const std::string negative = parse_error("1s2 2s-0.5");
  EXPECT_NE(negative.find("'2s-0.5'"), std::string::npos) << negative;
  EXPECT_NE(negative.find("column 5"), std::string::npos) << negative;
  EXPECT_NE(negative.find("negative"), std::string::npos) << negative;
}

TEST(AtomConfig, RejectsRepeatedSubshell) {
  const std::string twice = parse_error("1s2 2s1 2s1");
  EXPECT_NE(twice.find("'2s1'"), std::string::npos) << twice;
  EXPECT_NE(twice.find("column 9"), std::string::npos) << twice;

  const std::string in_core = parse_error("[Ne] 2p6");
  EXPECT_NE(in_core.find("'2p6'"), std::string::npos) << in_core;
  EXPECT_NE(in_core.find("column 6"), std::string::npos) << in_core;
  EXPECT_NE(in_core.find("overlapping shells"), std::string::npos) << in_core;

  const std::string core_after = parse_error("2p6 [Ne]");
  EXPECT_NE(core_after.find("'[Ne]'"), std::string::npos) << core_after;
  EXPECT_NE(core_after.find("column 5"), std::string::npos) << core_after;

  EXPECT_THROW(sp::parse_configuration("[He] [Ne]"), sp::InputError);
  EXPECT_THROW(sp::parse_configuration("[Ne]2p6"), sp::InputError);
}

TEST(AtomConfig, RejectsEmptyConfiguration) {
  const std::string msg = parse_error("");
  EXPECT_NE(msg.find("empty"), std::string::npos) << msg;
  EXPECT_NE(msg.find("column 1"), std::string::npos) << msg;
  EXPECT_THROW(sp::parse_configuration("   \t "), sp::InputError);
}

TEST(AtomConfig, ErrorCarriesCallerLocationAndStringColumn) {
  sp::SourceLocation where;
  where.file = "neon.toml";
  where.line = 7;
  where.key = "atom.configuration";
  try {
    sp::parse_configuration("[He] 2s2 2p7", where);
    FAIL() << "expected InputError";
  } catch (const sp::InputError& e) {
    EXPECT_EQ(e.where().file, "neon.toml");
    EXPECT_EQ(e.where().line, 7);
    EXPECT_EQ(e.where().key, "atom.configuration");
    EXPECT_EQ(e.where().column, 10);
    const std::string msg = e.what();
    EXPECT_NE(msg.find("neon.toml:7:10"), std::string::npos) << msg;
    EXPECT_NE(msg.find("atom.configuration"), std::string::npos) << msg;
  }
  // A caller that knows where the string starts in its file gets the file column.
  where.column = 17;
  try {
    sp::parse_configuration("[He] 2s2 2p7", where);
    FAIL() << "expected InputError";
  } catch (const sp::InputError& e) {
    EXPECT_EQ(e.where().column, 26);
    EXPECT_NE(std::string(e.what()).find("column 10 of"), std::string::npos) << e.what();
  }
}

TEST(AtomConfig, AtomicNumberFromSymbolOrNumber) {
  EXPECT_EQ(sp::atomic_number("Xe"), 54);
  EXPECT_EQ(sp::atomic_number("Mg"), 12);
  EXPECT_EQ(sp::atomic_number("mg"), 12);
  EXPECT_EQ(sp::atomic_number("MG"), 12);
  EXPECT_EQ(sp::atomic_number("12"), 12);
  EXPECT_EQ(sp::atomic_number(" H "), 1);
  EXPECT_EQ(sp::atomic_number("Og"), 118);
  for (int Z = 1; Z <= 118; ++Z) EXPECT_EQ(sp::atomic_number(sp::element_symbol(Z)), Z);
  EXPECT_EQ(sp::element_symbol(26), "Fe");
  EXPECT_THROW(sp::element_symbol(0), sp::InputError);
  EXPECT_THROW(sp::element_symbol(119), sp::InputError);
  EXPECT_THROW(sp::atomic_number("0"), sp::InputError);
  EXPECT_THROW(sp::atomic_number("119"), sp::InputError);
  EXPECT_THROW(sp::atomic_number(""), sp::InputError);
  EXPECT_THROW(sp::atomic_number("12a"), sp::InputError);
}

TEST(AtomConfig, SuggestsNearestSymbol) {
  const std::string msg = input_error_message([] { sp::atomic_number("Mgg"); });
  EXPECT_NE(msg.find("'Mgg'"), std::string::npos) << msg;
  EXPECT_NE(msg.find("did you mean 'Mg'"), std::string::npos) << msg;
}
