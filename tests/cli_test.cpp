// The command line as users and CI see it: exit codes, messages on stderr that name file,
// line and key, and output files that are complete or absent.
#include <gtest/gtest.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>
#include <regex>
#include <string>
#include <vector>

#include "cli_support.hpp"

namespace fs = std::filesystem;

namespace {

using clitest::CliRun;
using clitest::Scratch;
using clitest::slurp;

bool contains(const std::string& hay, const std::string& needle) { return hay.find(needle) != std::string::npos; }

std::vector<std::string> split(const std::string& s, char sep) {
  std::vector<std::string> out;
  std::string cur;
  std::istringstream ss(s);
  while (std::getline(ss, cur, sep)) out.push_back(cur);
  return out;
}

// No NaN or Inf anywhere in a JSON document (nlohmann writes non-finite numbers as null).
void expect_finite_json(const nlohmann::json& j, const std::string& where) {
  if (j.is_null()) ADD_FAILURE() << "null (non-finite number?) at " << where;
  if (j.is_number_float()) {
    EXPECT_TRUE(std::isfinite(j.get<double>())) << where;
  }
  if (j.is_object())
    for (const auto& [k, v] : j.items()) expect_finite_json(v, where + "." + k);
  if (j.is_array())
    for (std::size_t i = 0; i < j.size(); ++i) expect_finite_json(j[i], where + "[" + std::to_string(i) + "]");
}

// A CSV written by `solve`: '#' comment line, header with units, then rows of finite numbers.
void expect_numeric_csv(const std::string& text, const std::string& file, const std::vector<std::string>& units) {
  const auto lines = split(text, '\n');
  ASSERT_GE(lines.size(), 3u) << file;
  std::size_t i = 0;
  while (i < lines.size() && !lines[i].empty() && lines[i][0] == '#') ++i;
  ASSERT_LT(i, lines.size()) << file;
  const std::string& header = lines[i];
  for (const auto& u : units) EXPECT_TRUE(contains(header, u)) << file << " header '" << header << "' lacks " << u;
  const std::size_t ncol = split(header, ',').size();
  int rows = 0;
  for (++i; i < lines.size(); ++i) {
    if (lines[i].empty()) continue;
    const auto fields = split(lines[i], ',');
    ASSERT_EQ(fields.size(), ncol) << file << " line " << i + 1;
    for (const auto& f : fields) {
      char* end = nullptr;
      const double v = std::strtod(f.c_str(), &end);
      ASSERT_TRUE(end && *end == '\0' && !f.empty()) << file << " line " << i + 1 << ": '" << f << "'";
      ASSERT_TRUE(std::isfinite(v)) << file << " line " << i + 1 << ": " << f;
    }
    ++rows;
  }
  EXPECT_GT(rows, 10) << file;
  EXPECT_EQ(text.back(), '\n') << file << " does not end with a newline (truncated?)";
}

// A small XML well-formedness check: balanced tags, quoted attributes, escaped text, one root.
// Returns the element names in document order (with attributes) for counting.
struct XmlElement {
  std::string name;
  std::map<std::string, std::string> attributes;
};

bool valid_entities(const std::string& s) {
  for (std::size_t i = 0; i < s.size(); ++i) {
    if (s[i] == '<') return false;
    if (s[i] == '&') {
      const auto semi = s.find(';', i);
      if (semi == std::string::npos) return false;
      const std::string ent = s.substr(i, semi - i + 1);
      if (ent != "&lt;" && ent != "&gt;" && ent != "&amp;" && ent != "&quot;" && ent != "&apos;" && ent.rfind("&#", 0) != 0)
        return false;
    }
  }
  return true;
}

std::vector<XmlElement> parse_xml(const std::string& doc, std::string& error) {
  std::vector<XmlElement> elements;
  std::vector<std::string> stack;
  std::size_t i = 0, roots = 0;
  if (doc.rfind("<?xml", 0) == 0) i = doc.find("?>") + 2;
  auto is_name = [](char c) { return std::isalnum(static_cast<unsigned char>(c)) || c == '_' || c == '-' || c == ':' || c == '.'; };
  while (i < doc.size()) {
    const auto lt = doc.find('<', i);
    const std::string text = doc.substr(i, lt == std::string::npos ? std::string::npos : lt - i);
    if (!valid_entities(text)) return error = "bad character data: " + text, elements;
    if (stack.empty() && text.find_first_not_of(" \t\r\n") != std::string::npos) return error = "text outside the root", elements;
    if (lt == std::string::npos) break;
    i = lt + 1;
    if (doc.compare(i, 1, "/") == 0) {
      ++i;
      std::size_t b = i;
      while (i < doc.size() && is_name(doc[i])) ++i;
      const std::string name = doc.substr(b, i - b);
      while (i < doc.size() && std::isspace(static_cast<unsigned char>(doc[i]))) ++i;
      if (i >= doc.size() || doc[i] != '>') return error = "bad end tag " + name, elements;
      ++i;
      if (stack.empty() || stack.back() != name) return error = "mismatched end tag " + name, elements;
      stack.pop_back();
      continue;
    }
    XmlElement el;
    std::size_t b = i;
    while (i < doc.size() && is_name(doc[i])) ++i;
    el.name = doc.substr(b, i - b);
    if (el.name.empty()) return error = "empty tag name", elements;
    bool self_closing = false;
    while (true) {
      while (i < doc.size() && std::isspace(static_cast<unsigned char>(doc[i]))) ++i;
      if (i >= doc.size()) return error = "unterminated tag " + el.name, elements;
      if (doc[i] == '>') {
        ++i;
        break;
      }
      if (doc.compare(i, 2, "/>") == 0) {
        i += 2;
        self_closing = true;
        break;
      }
      b = i;
      while (i < doc.size() && is_name(doc[i])) ++i;
      const std::string attr = doc.substr(b, i - b);
      if (attr.empty() || i + 1 >= doc.size() || doc[i] != '=' || (doc[i + 1] != '"' && doc[i + 1] != '\''))
        return error = "bad attribute in " + el.name, elements;
      const char q = doc[i + 1];
      const auto close = doc.find(q, i + 2);
      if (close == std::string::npos) return error = "unterminated attribute", elements;
      const std::string value = doc.substr(i + 2, close - i - 2);
      if (!valid_entities(value)) return error = "bad attribute value " + value, elements;
      if (el.attributes.count(attr)) return error = "duplicate attribute " + attr, elements;
      el.attributes[attr] = value;
      i = close + 1;
    }
    if (stack.empty() && ++roots > 1) return error = "more than one root element", elements;
    elements.push_back(el);
    if (!self_closing) stack.push_back(el.name);
  }
  if (!stack.empty()) error = "unclosed element " + stack.back();
  if (roots == 0) error = "no root element";
  return elements;
}

const char* kGoodInput = R"(# two quick systems
[[system]]
name = "He"
kind = "atom"
element = "He"
spin = "polarized"
xc = ["lda_x", "lda_c_vwn"]
grid = "coarse"

[[system]]
name = "He_1d"
kind = "line"
xc = ["lda_x_1d_soft", "lda_c_1d_csc"]
[[system.nucleus]]
charge = 2.0
)";

}  // namespace

TEST(CliSolve, WritesCompleteFilesWithUnits) {
  Scratch s;
  s.write("in.toml", kGoodInput);
  const CliRun r = s.cli("solve in.toml --output out");
  ASSERT_EQ(r.rc, 0) << r.err;
  EXPECT_TRUE(contains(r.out, "system He:")) << r.out;
  EXPECT_TRUE(contains(r.out, "system He_1d:")) << r.out;
  for (const std::string name : {"He", "He_1d"}) {
    SCOPED_TRACE(name);
    ASSERT_TRUE(s.exists("out/" + name + ".json"));
    const nlohmann::json j = nlohmann::json::parse(s.read("out/" + name + ".json"));
    EXPECT_EQ(j["units"]["energy"], "hartree");
    EXPECT_EQ(j["units"]["length"], "bohr");
    EXPECT_TRUE(j["energy"].contains("total"));
    EXPECT_TRUE(j["levels"].is_array() && !j["levels"].empty());
    expect_finite_json(j, name);
    expect_numeric_csv(s.read("out/" + name + "_density.csv"), name + "_density.csv", {"bohr"});
    expect_numeric_csv(s.read("out/" + name + "_potentials.csv"), name + "_potentials.csv", {"bohr", "hartree"});
  }
  // Nothing else (no temporary files) is left in the output directory.
  int files = 0;
  for (const auto& e : fs::directory_iterator(s.dir() / "out")) {
    ++files;
    EXPECT_NE(e.path().filename().string()[0], '.') << e.path();
  }
  EXPECT_EQ(files, 6);
}

// Each case: input text, expected "file:line" prefix, key, and a phrase of the message.
TEST(CliSolve, InputErrorsNameFileLineAndKeyAndWriteNothing) {
  struct Case {
    std::string input;
    int line;
    std::string key, phrase;
  };
  const std::string atom = "[[system]]\nkind = \"atom\"\n";
  const std::string line = "[[system]]\nkind = \"line\"\n";
  const std::vector<Case> cases = {
      {"[[system]]\nkind = \"atom\nelement = \"He\"\n", 2, "", "TOML syntax error"},
      {"sytem = 1\n" + atom + "element = \"He\"\n", 1, "sytem", "did you mean 'system'?"},
      {atom + "elemnt = \"Xe\"\n", 3, "system[0].elemnt", "did you mean 'element'?"},
      {"[scf]\nmixng = 0.3\n" + atom + "element = \"He\"\n", 2, "scf.mixng", "did you mean 'mixing'?"},
      {atom + "element = \"He\"\ngrid = { degre = 10 }\n", 4, "system[0].grid.degre", "did you mean 'degree'?"},
      {atom + "element = \"C\"\nxc = [\"gga_x_pbee\", \"gga_c_pbe\"]\n", 4, "system[0].xc[0]", "did you mean 'gga_x_pbe'?"},
      {atom + "element = \"He\"\nxc = \"lda_x_1d_soft\"\n", 4, "system[0].xc", "1D functional"},
      {atom + "element = \"Ne\"\ncharge = 10\n", 4, "system[0].charge", "smaller than Z"},
      {line + "charge = 3\n[[system.nucleus]]\ncharge = 2.0\n", 3, "system[0].charge", "-1 electrons"},
      {line + "spin = \"polarized\"\nn_down = -1\n[[system.nucleus]]\ncharge = 2.0\n", 4, "system[0].n_down", "between 0"},
      {atom + "element = \"Ne\"\nconfiguration = \"[Ne] 2p6\"\n", 4, "system[0].configuration", "2p"},
      {atom + "element = \"Na\"\nconfiguration = \"[Ne]\"\n", 4, "system[0].configuration", "holds 10 electrons"},
      {atom + "element = \"Xe\"\ngrid = {first_element = 3.0}\n", 4, "system[0].grid.first_element", "too coarse for Xe"},
      {line + "grid = { element_size = 6.0 }\n[[system.nucleus]]\n", 3, "system[0].grid.element_size", "too coarse"},
      {atom + "element = \"He\"\ngrid = \"superfine\"\n", 4, "system[0].grid", "unknown grid preset 'superfine'"},
      {line + "[[system.nucleus]]\nposition = -31.0\n", 4, "system[0].nucleus[0].position", "box [-30, 30]"},
  };
  for (std::size_t k = 0; k < cases.size(); ++k) {
    const Case& c = cases[k];
    SCOPED_TRACE("case " + std::to_string(k) + ":\n" + c.input);
    Scratch s;
    s.write("in.toml", c.input);
    const CliRun r = s.cli("solve in.toml --output out");
    EXPECT_EQ(r.rc, 2) << r.err;
    EXPECT_TRUE(contains(r.err, "input error")) << r.err;
    EXPECT_TRUE(contains(r.err, "in.toml:" + std::to_string(c.line) + ":")) << r.err;
    if (!c.key.empty()) {
      EXPECT_TRUE(contains(r.err, "key '" + c.key + "'")) << r.err;
    }
    EXPECT_TRUE(contains(r.err, c.phrase)) << r.err;
    EXPECT_TRUE(s.absent_or_empty("out")) << "files were written for a failed run";
  }
}

TEST(CliSolve, NonConvergingScfExits3WithResidualHistory) {
  Scratch s;
  s.write("in.toml", "[scf]\nmax_iterations = 2\n[[system]]\nname = \"Mg\"\nkind = \"atom\"\nelement = \"Mg\"\n");
  const CliRun r = s.cli("solve in.toml --output out");
  EXPECT_EQ(r.rc, 3) << r.err;
  EXPECT_TRUE(contains(r.err, "numerical failure")) << r.err;
  EXPECT_TRUE(contains(r.err, "system 'Mg'")) << r.err;
  EXPECT_TRUE(contains(r.err, "in.toml:3")) << r.err;
  EXPECT_TRUE(contains(r.err, "residual history")) << r.err;
  EXPECT_TRUE(contains(r.err, "iter   1")) << r.err;
  EXPECT_TRUE(contains(r.err, "iter   2")) << r.err;
  EXPECT_TRUE(s.absent_or_empty("out"));
}

// The first system converges, the second does not: no file is written for either, so an
// output directory never holds a mixture of new and missing results.
TEST(CliSolve, FailureInSecondSystemWritesNoFiles) {
  Scratch s;
  s.write("in.toml", R"([scf]
max_iterations = 4
[[system]]
name = "trap"
kind = "line"
interacting = false
charge = -2
[[system.potential]]
kind = "harmonic"
omega = 1.0
[[system]]
name = "Mg"
kind = "atom"
element = "Mg"
)");
  const CliRun r = s.cli("solve in.toml --output out");
  EXPECT_EQ(r.rc, 3) << r.err;
  EXPECT_TRUE(contains(r.out, "system trap:")) << "the first system should have been solved:\n" << r.out;
  EXPECT_TRUE(contains(r.err, "system 'Mg'")) << r.err;
  EXPECT_TRUE(contains(r.err, "no output files were written")) << r.err;
  EXPECT_TRUE(s.absent_or_empty("out"));
}

// A problem that only shows when a system is discretized is found before any SCF runs.
TEST(CliSolve, AllSystemsAreCheckedBeforeAnyIsSolved) {
  Scratch s;
  s.write("in.toml", R"([[system]]
name = "trap"
kind = "line"
interacting = false
charge = -2
[[system.potential]]
kind = "harmonic"
omega = 1.0
[[system]]
name = "many_states"
kind = "line"
unoccupied_levels = 100000
[[system.nucleus]]
charge = 1.0
)");
  const CliRun r = s.cli("solve in.toml --output out");
  EXPECT_EQ(r.rc, 2) << r.err;
  EXPECT_TRUE(contains(r.err, "in.toml:9:")) << r.err;
  EXPECT_TRUE(contains(r.err, "many_states")) << r.err;
  EXPECT_FALSE(contains(r.out, "system trap:")) << "no system should be solved before all are checked";
  EXPECT_TRUE(s.absent_or_empty("out"));
}

TEST(CliSolve, UsageErrors) {
  Scratch s;
  EXPECT_EQ(s.cli("").rc, 2);
  EXPECT_EQ(s.cli("solve missing.toml").rc, 2);
  EXPECT_EQ(s.cli("solve --help").rc, 0);
  s.write("in.toml", kGoodInput);
  s.write("out", "a file, not a directory\n");
  const CliRun r = s.cli("solve in.toml --output out");
  EXPECT_EQ(r.rc, 2) << r.err;
  EXPECT_TRUE(contains(r.err, "not a directory")) << r.err;
}

// ---- check ----

namespace {

// The Mg LDA rows of the shipped reference table: one SCF, well under a second.
std::string mg_lda_table() {
  std::ifstream f(std::string(STILLPOINT_REFERENCE_DIR) + "/nist-lda-lsd.csv");
  std::string line, out;
  while (std::getline(f, line)) {
    if (line.rfind("Z,", 0) == 0 || line.rfind("12,Mg,0,", 0) == 0) {
      if (line.rfind("Z,", 0) == 0 || contains(line, ",LDA,")) out += line + "\n";
    }
  }
  return out;
}

}  // namespace

TEST(CliCheck, OutOfToleranceExits1WithJsonAndJunitReports) {
  Scratch s;
  const std::string table = mg_lda_table();
  const int rows = static_cast<int>(std::count(table.begin(), table.end(), '\n')) - 1;
  ASSERT_GE(rows, 5);
  s.write("mg.csv", table);
  const CliRun r = s.cli("check mg.csv --tolerance 1e-12 --report reports/check.json --junit reports/check.xml -q");
  EXPECT_EQ(r.rc, 1) << r.err;
  EXPECT_TRUE(contains(r.out, "FAIL")) << r.out;

  const nlohmann::json j = nlohmann::json::parse(s.read("reports/check.json"));
  ASSERT_TRUE(j["results"].is_array());
  ASSERT_EQ(static_cast<int>(j["results"].size()), rows);
  int failed = 0;
  double max_dev = 0.0;
  for (const auto& e : j["results"]) {
    for (const char* key : {"Z", "symbol", "charge", "approximation", "quantity", "reference", "computed", "deviation"})
      EXPECT_TRUE(e.contains(key)) << key << " missing in " << e.dump();
    EXPECT_EQ(e["Z"], 12);
    EXPECT_EQ(e["symbol"], "Mg");
    EXPECT_NEAR(e["deviation"].get<double>(), e["computed"].get<double>() - e["reference"].get<double>(), 1e-9);
    if (!e["passed"].get<bool>()) ++failed;
    max_dev = std::max(max_dev, std::abs(e["deviation"].get<double>()));
  }
  const auto& sum = j["summary"];
  EXPECT_EQ(sum["n_checked"], rows);
  EXPECT_EQ(sum["n_failed"], failed);
  EXPECT_GT(failed, 0);
  EXPECT_DOUBLE_EQ(sum["max_abs_deviation"].get<double>(), max_dev);
  expect_finite_json(j, "check.json");

  std::string error;
  const std::string xml = s.read("reports/check.xml");
  const auto elements = parse_xml(xml, error);
  ASSERT_TRUE(error.empty()) << error << "\n" << xml;
  int testcases = 0, failures = 0;
  const XmlElement* suite = nullptr;
  for (const auto& e : elements) {
    testcases += e.name == "testcase";
    failures += e.name == "failure";
    if (e.name == "testsuite") suite = &e;
  }
  ASSERT_NE(suite, nullptr);
  EXPECT_EQ(suite->attributes.at("tests"), std::to_string(rows));
  EXPECT_EQ(suite->attributes.at("failures"), std::to_string(failed));
  EXPECT_EQ(testcases, rows);
  EXPECT_EQ(failures, failed);
}

TEST(CliCheck, WithinToleranceExits0) {
  Scratch s;
  s.write("mg.csv", mg_lda_table());
  const CliRun r = s.cli("check mg.csv --tolerance 1e-4 --junit check.xml -q");
  EXPECT_EQ(r.rc, 0) << r.out << r.err;
  EXPECT_TRUE(contains(r.out, "PASS")) << r.out;
  std::string error;
  const auto elements = parse_xml(s.read("check.xml"), error);
  EXPECT_TRUE(error.empty()) << error;
  for (const auto& e : elements) EXPECT_NE(e.name, "failure");
}

TEST(CliCheck, MalformedTablesExit2AndWriteNoReports) {
  struct Case {
    std::string table;
    std::string where, phrase;
  };
  const std::string h = "Z,symbol,charge,configuration,approximation,quantity,value\n";
  const std::vector<Case> cases = {
      {"Z,symbol,charge,configuration,approx,quantity,value\n", "t.csv:1:31", "expected the header line"},
      {h + "12,Mg,0,[Ne] 3s2,LDA,Etot,-199.x\n", "t.csv:2:27", "not a number"},
      {h + "12,Mg,0,[Ne] 3s2,LDA,Etot,-199.1\n12,Mg,0,[Ne] 3s2,LDA,E_total,-199\n", "t.csv:3:22", "unknown quantity"},
      {h + "12,Al,0,[Ne] 3s2,LDA,Etot,-199.1\n", "t.csv:2:4", "does not match Z = 12 (Mg)"},
  };
  for (const auto& c : cases) {
    SCOPED_TRACE(c.table);
    Scratch s;
    s.write("t.csv", c.table);
    const CliRun r = s.cli("check t.csv --report out/r.json --junit out/r.xml -q");
    EXPECT_EQ(r.rc, 2) << r.err;
    EXPECT_TRUE(contains(r.err, c.where)) << r.err;
    EXPECT_TRUE(contains(r.err, c.phrase)) << r.err;
    EXPECT_TRUE(s.absent_or_empty("out"));
  }
}

TEST(CliCheck, UnknownGridPresetExits2) {
  Scratch s;
  s.write("mg.csv", mg_lda_table());
  const CliRun r = s.cli("check mg.csv --grid fine -q");
  EXPECT_EQ(r.rc, 2) << r.err;
  EXPECT_TRUE(contains(r.err, "--grid")) << r.err;
}

// A renamed key is refused with the new name, not guessed at.
TEST(CliSolve, RenamedKeyNamesItsNewName) {
  Scratch s;
  s.write("in.toml", R"([[system]]
name = "one"
kind = "line"
extra_states = 3
[[system.nucleus]]
charge = 1.0
)");
  const CliRun r = s.cli("solve in.toml --output out");
  EXPECT_EQ(r.rc, 2) << r.err;
  EXPECT_TRUE(contains(r.err, "in.toml:4:16: key 'system[0].extra_states': 'extra_states' was renamed: use 'unoccupied_levels'"))
      << r.err;
  EXPECT_TRUE(s.absent_or_empty("out"));
}

// An output folder that cannot be created (its parent is a regular file) is an output failure
// with its own wording and exit status 5, never an input error.
TEST(CliSolve, UnwritableOutputExits5NotInputError) {
  Scratch s;
  s.write("in.toml", "[[system]]\nname = \"He\"\nkind = \"line\"\nxc = [\"lda_x_1d_soft\"]\n[[system.nucleus]]\ncharge = 2.0\n");
  s.write("plain", "a file, not a folder\n");
  const CliRun r = s.cli("solve in.toml --output plain/out");
  EXPECT_EQ(r.rc, 5) << r.err;
  EXPECT_TRUE(contains(r.err, "output could not be written")) << r.err;
  EXPECT_FALSE(contains(r.err, "input error")) << r.err;
  EXPECT_EQ(s.read("plain"), "a file, not a folder\n");
}

// check: an unusable report path is found before any atom is solved, and no report is written
// (all reports or none).
TEST(CliCheck, UnwritableJunitStopsBeforeComputingAndWritesNoReport) {
  Scratch s;
  s.write("t.csv", "Z,symbol,charge,configuration,approximation,quantity,value\n2,He,0,1s2,LDA,Etot,-2.834836\n");
  s.write("plain", "a file\n");
  const CliRun r = s.cli("check t.csv --report a.json --junit plain/b.xml");
  EXPECT_EQ(r.rc, 5) << r.err;
  EXPECT_TRUE(contains(r.err, "not a folder")) << r.err;
  EXPECT_TRUE(s.absent_or_empty("a.json"));
  EXPECT_FALSE(contains(r.err, "done:")) << "no atom may be solved first: " << r.err;
}

// Long work shows progress on standard error; --quiet silences it and changes nothing else
// (results on standard output stay the same, up to the measured times; warnings still appear).
TEST(CliProgress, QuietSilencesProgressOnlyForEverySubcommand) {
  const std::string root = STILLPOINT_SOURCE_DIR;
  const std::vector<std::string> runs = {
      "solve '" + root + "/workflows/solve-1d-molecule.toml'",
      "check '" + root + "/basis-data/reference/nist-lda-lsd.csv'",
      "grad '" + root + "/workflows/grad-1d-helium.toml' --verify",
      "fit '" + root + "/workflows/fit-atoms-xalpha.toml'",
      "invert '" + root + "/workflows/invert-1d-noninteracting.toml'",
      "functionals --survey quick --only lda_x --only gga_x_pbe",
  };
  const std::regex seconds(R"([0-9.]+(e[-+]?[0-9]+)? s\b)");
  for (const std::string& args : runs) {
    clitest::Scratch dir;
    const clitest::CliRun loud = dir.cli(args);
    const clitest::CliRun quiet = dir.cli(args + " --quiet");
    EXPECT_EQ(loud.rc, 0) << args << "\n" << loud.err;
    EXPECT_EQ(quiet.rc, 0) << args;
    EXPECT_FALSE(loud.err.empty()) << args << ": no progress lines";
    // Warnings are not progress: they stay.
    EXPECT_EQ(std::regex_replace(quiet.err, std::regex("stillpoint: warning: [^\n]*\n"), ""), "") << args;
    EXPECT_EQ(std::regex_replace(loud.out, seconds, "T s"), std::regex_replace(quiet.out, seconds, "T s")) << args;
  }
}

// A system label that the survey does not have is an input error that names it and the
// nearest label, before any functional is solved, and no table is written.
TEST(CliFunctionals, UnknownEnergiesOfLabelIsAnInputError) {
  clitest::Scratch s;
  const clitest::CliRun r = s.cli("functionals --survey docs --only lda_x --energies-of NE --markdown t.md");
  EXPECT_EQ(r.rc, 2) << r.err;
  EXPECT_TRUE(contains(r.err, "no system 'NE'")) << r.err;
  EXPECT_TRUE(contains(r.err, "did you mean 'Ne'")) << r.err;
  EXPECT_TRUE(s.absent_or_empty("t.md"));
  const clitest::CliRun ok = s.cli("functionals --survey docs --only lda_x --energies-of Ne --markdown t.md -q");
  EXPECT_EQ(ok.rc, 0) << ok.err;
  EXPECT_TRUE(contains(s.read("t.md"), "Ne -127.4907")) << s.read("t.md");
  EXPECT_FALSE(contains(s.read("t.md"), "line He -")) << s.read("t.md");
}
