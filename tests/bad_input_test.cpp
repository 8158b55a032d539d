// Library-level behaviour on unusable input: every problem is an InputError that names the
// file, the line (and column where it makes sense) and the key, and says what to do. A
// non-converging SCF is a NumericalError that carries the residual history.
#include <gtest/gtest.h>
#include <unistd.h>

#include <filesystem>
#include <fstream>
#include <functional>
#include <string>
#include <vector>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/input.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/ks/scf.hpp"

namespace sp = stillpoint;
namespace fs = std::filesystem;

namespace {

struct Caught {
  bool thrown = false;
  std::string message;
  sp::SourceLocation where;
};

Caught catch_input_error(const std::function<void()>& f) {
  Caught c;
  try {
    f();
  } catch (const sp::InputError& e) {
    c.thrown = true;
    c.message = e.what();
    c.where = e.where();
  }
  return c;
}

Caught parse_error(const std::string& text, const std::string& name = "case.toml") {
  return catch_input_error([&] { (void)sp::parse_solve_input(text, name); });
}

// Asserts an InputError located at `line` with the dotted `key`, whose message contains `needle`.
void expect_error(const std::string& text, int line, const std::string& key, const std::string& needle) {
  const Caught c = parse_error(text);
  ASSERT_TRUE(c.thrown) << "no InputError for:\n" << text;
  EXPECT_EQ(c.where.file, "case.toml") << c.message;
  EXPECT_EQ(c.where.line, line) << c.message;
  EXPECT_EQ(c.where.key, key) << c.message;
  EXPECT_NE(c.message.find(needle), std::string::npos) << "message: " << c.message << "\nexpected to contain: " << needle;
  // The message itself starts with file:line so that it is useful without the structured fields.
  EXPECT_EQ(c.message.rfind("case.toml:" + std::to_string(line), 0), 0u) << c.message;
}

const std::string kAtomHead = "[[system]]\nkind = \"atom\"\n";  // lines 1-2
const std::string kLineHead = "[[system]]\nkind = \"line\"\n";

class TempDir {
 public:
  explicit TempDir(const std::string& tag) {
    static int counter = 0;
    path_ = fs::temp_directory_path() /
            ("stillpoint-badinput-" + tag + "-" + std::to_string(::getpid()) + "-" + std::to_string(counter++));
    fs::remove_all(path_);
    fs::create_directories(path_);
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path_, ec);
  }
  std::string write(const std::string& name, const std::string& content) const {
    const fs::path p = path_ / name;
    std::ofstream(p) << content;
    return p.string();
  }
  const fs::path& path() const { return path_; }

 private:
  fs::path path_;
};

}  // namespace

TEST(BadInputToml, SyntaxErrorGivesLineAndColumn) {
  const Caught c = parse_error("[[system]]\nkind = \"atom\"\nelement = \"Ne\n");
  ASSERT_TRUE(c.thrown);
  EXPECT_EQ(c.where.line, 3) << c.message;
  EXPECT_GT(c.where.column, 0) << c.message;
  EXPECT_NE(c.message.find("case.toml:3:"), std::string::npos) << c.message;
  EXPECT_NE(c.message.find("TOML syntax error"), std::string::npos) << c.message;

  const Caught h = parse_error("[[system]\nkind = \"line\"\n");
  ASSERT_TRUE(h.thrown);
  EXPECT_EQ(h.where.line, 1) << h.message;
  EXPECT_GT(h.where.column, 0) << h.message;
}

TEST(BadInputKeys, UnknownTopLevelKeySuggestsNearest) {
  expect_error("[[sytem]]\nkind = \"atom\"\nelement = \"He\"\n", 1, "sytem", "did you mean 'system'?");
  expect_error("title = \"x\"\n" + kAtomHead + "element = \"He\"\n", 1, "title", "unknown key");
}

TEST(BadInputKeys, UnknownSystemKeySuggestsNearest) {
  expect_error(kAtomHead + "elemnt = \"Xe\"\n", 3, "system[0].elemnt", "did you mean 'element'?");
  expect_error(kLineHead + "electron_softnening = 1.0\n[[system.nucleus]]\n", 3, "system[0].electron_softnening",
               "did you mean 'electron_softening'?");
  // A misspelt kind key is reported as the typo, not as a missing kind.
  expect_error("[[system]]\nknd = \"atom\"\n", 2, "system[0].knd", "did you mean 'kind'?");
}

TEST(BadInputKeys, KeyOfTheOtherKindIsExplained) {
  expect_error(kAtomHead + "element = \"He\"\nelectron_softening = 1.0\n", 4, "system[0].electron_softening",
               "belongs to line systems");
  expect_error(kLineHead + "element = \"He\"\n", 3, "system[0].element", "belongs to atoms");
}

TEST(BadInputKeys, UnknownScfKeySuggestsNearest) {
  expect_error("[scf]\nmax_iteration = 10\n" + kAtomHead + "element = \"He\"\n", 2, "scf.max_iteration",
               "did you mean 'max_iterations'?");
  expect_error("[scf]\nmixing = 1.5\n" + kAtomHead + "element = \"He\"\n", 2, "scf.mixing", "(0, 1]");
}

TEST(BadInputKeys, UnknownGridKeySuggestsNearest) {
  expect_error(kAtomHead + "element = \"He\"\ngrid = { first_elemnt = 0.5 }\n", 4, "system[0].grid.first_elemnt",
               "did you mean 'first_element'?");
  expect_error(kLineHead + "grid = { half_widht = 25.0 }\n[[system.nucleus]]\n", 3, "system[0].grid.half_widht",
               "did you mean 'half_width'?");
  expect_error(kAtomHead + "element = \"He\"\ngrid = { half_width = 25.0 }\n", 4, "system[0].grid.half_width",
               "belongs to line systems");
}

TEST(BadInputKeys, MissingOrUnknownKind) {
  expect_error("[[system]]\nelement = \"He\"\n", 1, "system[0].kind", "missing kind");
  expect_error("[[system]]\nkind = \"atm\"\n", 2, "system[0].kind", "did you mean 'atom'?");
}

TEST(BadInputKeys, WrongTypesNameTheKey) {
  expect_error(kAtomHead + "element = \"He\"\ncharge = \"one\"\n", 4, "system[0].charge", "expected a number");
  expect_error(kAtomHead + "Z = 2.5\n", 3, "system[0].Z", "expected an integer");
  expect_error(kLineHead + "interacting = 1\n[[system.nucleus]]\n", 3, "system[0].interacting", "true or false");
  expect_error(kAtomHead + "name = \"../escape\"\nelement = \"He\"\n", 3, "system[0].name", "file names");
}

TEST(BadInputXc, UnknownFunctionalSuggestsLibxcName) {
  expect_error(kAtomHead + "element = \"C\"\nxc = [\"lda_x\",\n      \"gga_x_pbee\"]\n", 5, "system[0].xc[1]",
               "did you mean 'gga_x_pbe'?");
  expect_error(kAtomHead + "element = \"C\"\nxc = \"lda_x + lda_c_vwm\"\n", 4, "system[0].xc", "lda_c_vwn");
  expect_error(kAtomHead + "element = \"C\"\nxc = [\"0.5x*gga_x_pbe\"]\n", 4, "system[0].xc[0]", "weight");
}

TEST(BadInputXc, OneDimensionalFunctionalOnAtom) {
  expect_error(kAtomHead + "element = \"He\"\nxc = [\"lda_x_1d_soft\"]\n", 4, "system[0].xc[0]", "1D functional");
  expect_error(kAtomHead + "element = \"He\"\nxc = [\"lda_c_1d_csc\"]\n", 4, "system[0].xc[0]", "1D functional");
}

TEST(BadInputXc, WeightedAndNumberedFunctionalsAreAccepted) {
  const sp::SolveInput in = sp::parse_solve_input(
      kAtomHead + "element = \"Ne\"\nxc = [\"0.75*gga_x_pbe\", \"0.25*lda_x\", 130]\n", "case.toml");
  ASSERT_EQ(in.systems.size(), 1u);
  EXPECT_EQ(in.systems[0].xc, (std::vector<std::string>{"0.75*gga_x_pbe", "0.25*lda_x", "130"}));
  const sp::SolveInput s = sp::parse_solve_input(kAtomHead + "element = \"Ne\"\nxc = \"0.5*gga_x_pbe+0.5*lda_x + gga_c_pbe\"\n",
                                                 "case.toml");
  EXPECT_EQ(s.systems[0].xc, (std::vector<std::string>{"0.5*gga_x_pbe", "0.5*lda_x", "gga_c_pbe"}));
  // The '+' of an exponent in a weight does not split terms.
  const sp::SolveInput e = sp::parse_solve_input(kAtomHead + "element = \"Ne\"\nxc = \"1e+0*lda_x + lda_c_vwn\"\n", "case.toml");
  EXPECT_EQ(e.systems[0].xc, (std::vector<std::string>{"1e+0*lda_x", "lda_c_vwn"}));
}

TEST(BadInputElectrons, AtomChargeNotBelowZ) {
  expect_error(kAtomHead + "element = \"Na\"\ncharge = 11\n", 4, "system[0].charge", "smaller than Z");
  expect_error(kAtomHead + "element = \"Na\"\ncharge = 12.5\nconfiguration = \"1s1\"\n", 4, "system[0].charge",
               "smaller than Z");
}

TEST(BadInputElectrons, LineChargeLeavesNoElectrons) {
  expect_error(kLineHead + "charge = 2\n[[system.nucleus]]\ncharge = 1.0\n", 3, "system[0].charge", "-1 electrons");
  // No nuclei and no charge: zero electrons, with a hint how to add some.
  expect_error(kLineHead + "[[system.potential]]\nkind = \"harmonic\"\n", 1, "system[0].charge", "charge = -N");
}

TEST(BadInputElectrons, NegativeOrInconsistentSpinCounts) {
  const std::string head = kLineHead + "spin = \"polarized\"\n";  // lines 1-3
  expect_error(head + "n_up = -1\n[[system.nucleus]]\ncharge = 2.0\n", 4, "system[0].n_up", "between 0 and");
  expect_error(head + "n_up = 1\nn_down = 2\n[[system.nucleus]]\ncharge = 2.0\n", 5, "system[0].n_down",
               "n_up + n_down = 3");
  expect_error(head + "occupations = { up = [1, -0.5], down = [1] }\n[[system.nucleus]]\ncharge = 2.0\n", 4,
               "system[0].occupations", "outside [0, 1]");
  expect_error(kLineHead + "occupations = [2, 2]\n[[system.nucleus]]\ncharge = 2.0\n", 3, "system[0].occupations",
               "sum to 4");
}

TEST(BadInputConfiguration, OverlappingShells) {
  const Caught c = parse_error(kAtomHead + "element = \"Ne\"\nconfiguration = \"[Ne] 2p6\"\n");
  ASSERT_TRUE(c.thrown);
  EXPECT_EQ(c.where.line, 4) << c.message;
  EXPECT_EQ(c.where.key, "system[0].configuration") << c.message;
  EXPECT_NE(c.message.find("2p"), std::string::npos) << c.message;
  EXPECT_NE(c.message.find("case.toml:4:"), std::string::npos) << c.message;
  // The column points into the file: 'configuration = "' is 17 characters, the token '2p6' starts 5 later.
  EXPECT_EQ(c.where.column, 23) << c.message;
}

TEST(BadInputConfiguration, ElectronCountDiffersFromZMinusCharge) {
  expect_error(kAtomHead + "element = \"Mg\"\ncharge = 1\nconfiguration = \"[Ne] 3s2\"\n", 5, "system[0].configuration",
               "holds 12 electrons");
  expect_error(kAtomHead + "element = \"Li\"\ncharge = 0.5\n", 4, "system[0].charge", "explicit configuration");
}

TEST(BadInputGrid, RadialGridTooCoarseForZ) {
  expect_error(kAtomHead + "element = \"Xe\"\ngrid = {first_element = 3.0}\n", 4, "system[0].grid.first_element",
               "too coarse for Xe (Z = 54)");
}

TEST(BadInputGrid, LineGridTooCoarseForSoftening) {
  expect_error(kLineHead + "grid = { element_size = 8.0 }\n[[system.nucleus]]\n", 3, "system[0].grid.element_size",
               "too coarse");
  // A small nuclear softening needs a finer grid; the message names the softening.
  const Caught c =
      parse_error(kLineHead + "[[system.nucleus]]\nsoftening = 0.2\n");
  ASSERT_TRUE(c.thrown);
  EXPECT_EQ(c.where.key, "system[0].grid") << c.message;
  EXPECT_NE(c.message.find("system[0].nucleus[0].softening"), std::string::npos) << c.message;
}

TEST(BadInputGrid, UnknownPresetListsValidOnes) {
  expect_error(kAtomHead + "element = \"He\"\ngrid = \"defualt\"\n", 4, "system[0].grid", "did you mean 'default'?");
  expect_error(kLineHead + "grid = { preset = \"fine\" }\n[[system.nucleus]]\n", 3, "system[0].grid.preset",
               "coarse, default, tight");
}

TEST(BadInputGrid, NucleusOutsideTheBox) {
  expect_error(kLineHead + "[[system.nucleus]]\ncharge = 1.0\nposition = 40.0\n", 5, "system[0].nucleus[0].position",
               "box [-30, 30]");
  expect_error(kLineHead + "grid = { half_width = 10.0 }\n[[system.nucleus]]\nposition = -7.5\n", 5,
               "system[0].nucleus[0].position", "half_width");
}

TEST(BadInputPotential, UnknownKindAndBadTableFile) {
  expect_error(kLineHead + "charge = -1\n[[system.potential]]\nkind = \"harmonc\"\n", 5, "system[0].potential[0].kind",
               "did you mean 'harmonic'?");
  TempDir dir("table");
  dir.write("pot.csv", "x_bohr,v_hartree\n-5,1\n0,zero\n5,1\n");
  const std::string input = dir.write(
      "in.toml", kLineHead + "charge = -1\n[[system.potential]]\nkind = \"table\"\nfile = \"pot.csv\"\n");
  const Caught c = catch_input_error([&] { (void)sp::read_solve_input(input); });
  ASSERT_TRUE(c.thrown);
  EXPECT_EQ(c.where.file, input);
  EXPECT_EQ(c.where.line, 6) << c.message;
  EXPECT_EQ(c.where.key, "system[0].potential[0].file") << c.message;
  // Both places are named: the input key and the table's own line.
  EXPECT_NE(c.message.find("pot.csv:3"), std::string::npos) << c.message;

  const Caught missing = parse_error(kLineHead + "charge = -1\n[[system.potential]]\nkind = \"table\"\nfile = \"nope.csv\"\n");
  ASSERT_TRUE(missing.thrown);
  EXPECT_EQ(missing.where.line, 6) << missing.message;
  EXPECT_NE(missing.message.find("cannot open"), std::string::npos) << missing.message;
}

TEST(BadInputSystems, DuplicateNamesAndMissingSystems) {
  expect_error(kAtomHead + "name = \"A\"\nelement = \"He\"\n" + kAtomHead + "name = \"A\"\nelement = \"Ne\"\n", 7,
               "system[1].name", "duplicate system name 'A'");
  expect_error("[scf]\nmax_iterations = 5\n", 1, "system", "no [[system]]");
  expect_error("[system]\nkind = \"atom\"\n", 1, "system", "double brackets");
}

// Every error carries a file and a line > 0, whatever went wrong.
TEST(BadInputSystems, EveryErrorHasFileAndLine) {
  const std::vector<std::string> cases = {
      "[[system]]\n",
      kAtomHead,
      kAtomHead + "Z = 0\n",
      kAtomHead + "element = \"Qq\"\n",
      kAtomHead + "element = \"He\"\nspin = \"up\"\n",
      kAtomHead + "element = \"He\"\nZ = 2\n",
      kAtomHead + "element = \"He\"\ncharge = -3\n",
      kAtomHead + "element = \"He\"\ngrid = { degree = 40 }\n",
      kAtomHead + "element = \"He\"\ngrid = { r_max = 5.0 }\n",
      kAtomHead + "element = \"He\"\ngrid = { elements = 1 }\n",
      kAtomHead + "element = \"He\"\nconfiguration = \"1s3\"\n",
      kAtomHead + "element = \"He\"\nconfiguration = 2\n",
      kLineHead,
      kLineHead + "electron_softening = 0\n[[system.nucleus]]\n",
      kLineHead + "[[system.nucleus]]\nsoftening = -1\n",
      kLineHead + "n_up = 1\n[[system.nucleus]]\n",
      kLineHead + "unoccupied_levels = -1\n[[system.nucleus]]\n",
      kLineHead + "interacting = false\nxc = \"lda_x_1d_soft\"\n[[system.nucleus]]\n",
      kLineHead + "electron_softening = 0.7\nxc = \"lda_c_1d_csc\"\n[[system.nucleus]]\nsoftening = 0.7\n",
      kLineHead + "[[system.potential]]\nkind = \"gaussian\"\nwidth = 0\n",
      kLineHead + "[[system.potential]]\nkind = \"table\"\n",
      "[scf]\ndensity_threshold = 1.0\n" + kAtomHead + "element = \"He\"\n",
      "[scf]\nmax_iterations = 0\n" + kAtomHead + "element = \"He\"\n",
      "[scf]\npotential_tolerance = -1\n" + kAtomHead + "element = \"He\"\n",
      "scf = 3\n" + kAtomHead + "element = \"He\"\n",
  };
  for (const auto& text : cases) {
    const Caught c = parse_error(text);
    ASSERT_TRUE(c.thrown) << "accepted:\n" << text;
    EXPECT_EQ(c.where.file, "case.toml") << c.message;
    EXPECT_GT(c.where.line, 0) << c.message << "\nfor:\n" << text;
    EXPECT_FALSE(c.where.key.empty()) << c.message;
  }
}

TEST(BadInputSystems, ShippedWorkflowsParse) {
  for (const char* name : {"solve-demo.toml", "solve-atoms-gga.toml", "solve-1d-molecule.toml"}) {
    const std::string path = std::string(STILLPOINT_SOURCE_DIR) + "/workflows/" + name;
    sp::SolveInput in;
    ASSERT_NO_THROW(in = sp::read_solve_input(path)) << path;
    EXPECT_FALSE(in.systems.empty()) << path;
    EXPECT_EQ(in.system_locations.size(), in.systems.size());
    for (const auto& w : in.system_locations) EXPECT_GT(w.line, 0);
  }
}

TEST(BadInputScf, NonConvergingScfIsNumericalErrorWithHistory) {
  const sp::SolveInput in =
      sp::parse_solve_input("[scf]\nmax_iterations = 2\n" + kAtomHead + "element = \"He\"\n", "case.toml");
  sp::KsProblem problem(in.systems[0]);
  try {
    (void)sp::solve_scf(problem, in.scf);
    FAIL() << "expected NumericalError";
  } catch (const sp::NumericalError& e) {
    EXPECT_NE(std::string(e.what()).find("did not converge"), std::string::npos) << e.what();
    ASSERT_EQ(e.details().size(), 3u);  // a header line, then one line per iteration
    EXPECT_NE(e.details()[0].find("residual"), std::string::npos) << e.details()[0];
  }
}

// ---- reference tables (the `check` CSV format) ----

namespace {

const std::string kHeader = "Z,symbol,charge,configuration,approximation,quantity,value\n";

Caught table_error(const TempDir& dir, const std::string& content) {
  const std::string path = dir.write("table.csv", content);
  return catch_input_error([&] { (void)sp::read_reference_table(path); });
}

void expect_table_error(const std::string& content, int line, int column, const std::string& needle) {
  TempDir dir("csv");
  const Caught c = table_error(dir, content);
  ASSERT_TRUE(c.thrown) << "accepted:\n" << content;
  EXPECT_EQ(c.where.line, line) << c.message;
  if (column > 0) {
    EXPECT_EQ(c.where.column, column) << c.message;
  }
  EXPECT_NE(c.message.find("table.csv:" + std::to_string(line)), std::string::npos) << c.message;
  EXPECT_NE(c.message.find(needle), std::string::npos) << "message: " << c.message << "\nexpected: " << needle;
}

}  // namespace

TEST(BadInputCsv, BadHeader) {
  expect_table_error("# comment\nZ,symbol,charge,config,approximation,quantity,value\n", 2, 17, "'config'");
  // A data row where the header belongs.
  expect_table_error("12,Mg,0,[Ne] 3s2,LDA,Etot,-199.1\n", 1, 1, "expected the header line");
}

TEST(BadInputCsv, NonNumericValueGivesLineAndColumn) {
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LDA,Etot,-199.1\n12,Mg,0,[Ne] 3s2,LDA,Ekin,abc\n", 3, 27, "'abc' is not a number");
  expect_table_error(kHeader + "twelve,Mg,0,[Ne] 3s2,LDA,Etot,-199.1\n", 2, 1, "not a number");
}

TEST(BadInputCsv, UnknownQuantity) {
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LDA,Etotal,-199.1\n", 2, 22, "unknown quantity 'Etotal'");
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LSD,eps_3s,-0.17\n", 2, 22, "spin suffix");
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LDA,eps_3p,-0.17\n", 2, 22, "not part of the configuration");
}

TEST(BadInputCsv, WrongSymbolForZ) {
  expect_table_error(kHeader + "12,Na,0,[Ne] 3s2,LDA,Etot,-199.1\n", 2, 4, "does not match Z = 12 (Mg)");
}

TEST(BadInputCsv, InconsistentRows) {
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s1,LDA,Etot,-199.1\n", 2, 9, "holds 11 electrons");
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LDA,Etot,-199.1\n12,Mg,0,[Ne] 3s2,LDA,Etot,-199.2\n", 3, 0, "duplicate of line 2");
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LDA,Etot,-199.1\n12,Mg,0,[Ne] 3s1 3p1,LDA,Ekin,199\n", 3, 9,
                     "differs from line 2");
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,PBE,Etot,-199.1\n", 2, 18, "LDA (spin-unpolarized) or LSD");
  expect_table_error(kHeader + "12,Mg,0,[Ne] 3s2,LDA,Etot\n", 2, 1, "7 comma-separated fields");
}

TEST(BadInputCsv, ShippedTableReads) {
  // The shipped copy of NIST SRD 141's Mg page (basis-data/reference/nist-lda-lsd.csv): 44 rows,
  // Mg and Mg+ in LDA and LSD; first and last rows as printed there.
  const auto rows = sp::read_reference_table(std::string(STILLPOINT_REFERENCE_DIR) + "/nist-lda-lsd.csv");
  ASSERT_EQ(rows.size(), 44u);
  EXPECT_EQ(rows.front().Z, 12);
  EXPECT_EQ(rows.front().charge, 0);
  EXPECT_EQ(rows.front().configuration, "[Ne] 3s2");
  EXPECT_EQ(rows.front().approximation, "LDA");
  EXPECT_EQ(rows.front().quantity, "Etot");
  EXPECT_EQ(rows.front().value, -199.139406);
  EXPECT_EQ(rows.back().charge, 1);
  EXPECT_EQ(rows.back().approximation, "LSD");
  EXPECT_EQ(rows.back().quantity, "eps_3s_up");
  EXPECT_EQ(rows.back().value, -0.388421);
  EXPECT_EQ(rows.back().line, 51);  // 7 comment lines and the header come first
}
