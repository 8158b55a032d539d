#include "targets.hpp"

#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <exception>
#include <fstream>

#include "fit/checkpoint.hpp"
#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/exact/two_electron.hpp"
#include "stillpoint/fit/input.hpp"
#include "stillpoint/invert/inversion.hpp"
#include "stillpoint/ks/external_potential.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/input.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/response/input.hpp"
#include "stillpoint/xc/formula.hpp"

namespace stillpoint::fuzz {
namespace {

std::string text_of(const std::uint8_t* data, std::size_t size) {
  return std::string(reinterpret_cast<const char*>(data), size);
}

// The CSV readers open paths, so their bytes go through a scratch file of this process.
std::string scratch_file(const std::uint8_t* data, std::size_t size) {
  static const std::string path = [] {
    const char* dir = std::getenv("TMPDIR");
    return std::string(dir && *dir ? dir : "/tmp") + "/stillpoint-fuzz-" + std::to_string(::getpid()) + ".csv";
  }();
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out.write(reinterpret_cast<const char*>(data), static_cast<std::streamsize>(size));
  out.close();
  if (!out) {
    std::fprintf(stderr, "fuzz: cannot write the scratch file %s\n", path.c_str());
    std::abort();
  }
  return path;
}

// Relative paths named inside a fuzzed file resolve against a name in a folder that does not
// exist, so no input can make a reader open the test machine's files.
const std::string kName = "/nonexistent-stillpoint-fuzz/input.toml";

void solve_input(const std::uint8_t* d, std::size_t n) { (void)parse_solve_input(text_of(d, n), kName); }
void grad_input(const std::uint8_t* d, std::size_t n) { (void)parse_grad_input(text_of(d, n), kName); }
void fit_input(const std::uint8_t* d, std::size_t n) { (void)parse_fit_workflow(text_of(d, n), kName); }
void exact_input(const std::uint8_t* d, std::size_t n) { (void)parse_exact_input(text_of(d, n), kName); }
void invert_input(const std::uint8_t* d, std::size_t n) { (void)parse_invert_input(text_of(d, n), kName); }

// A formula with three parameters, evaluated once where compilation succeeds: evaluation is
// where a malformed program would read past its stack.
void formula(const std::uint8_t* d, std::size_t n) {
  FormulaSpec spec;
  spec.name = "fuzz";
  spec.expression = text_of(d, n);
  spec.parameter_names = {"a", "b", "c"};
  spec.parameter_values = {0.5, 2.0, 0.25};
  spec.where = SourceLocation{kName, 1, 1, "expression"};
  const auto family = compile_formula(spec);
  const int vars = 5, order = 2;
  const Jet nu = Jet::variable(0.3, 0, vars, order), nd = Jet::variable(0.2, 1, vars, order);
  const Jet suu = Jet::variable(0.01, 2, vars, order), sud = Jet::variable(0.005, 3, vars, order),
            sdd = Jet::variable(0.02, 4, vars, order);
  std::vector<Jet> params;
  for (double p : spec.parameter_values) params.push_back(Jet(p, vars, order));
  XcSettings settings;
  (void)family->energy(nu, nd, suu, sud, sdd, params, settings);
}

void reference_table(const std::uint8_t* d, std::size_t n) { (void)read_reference_table(scratch_file(d, n)); }
void potential_table(const std::uint8_t* d, std::size_t n) { (void)read_potential_table(scratch_file(d, n)); }

// Density tables are read onto a mesh: a small line mesh, two electrons of one spin pair.
void target_density(const std::uint8_t* d, std::size_t n) {
  static const Mesh mesh = [] {
    MeshSpec spec = grid_preset(Geometry::Line, "default");
    spec.half_width = 8.0;
    return Mesh::line(spec);
  }();
  (void)read_target_density(scratch_file(d, n), mesh, {1.0, 1.0}, SourceLocation{kName, 1, 1, "density"});
}

void checkpoint(const std::uint8_t* d, std::size_t n) { (void)parse_checkpoint(text_of(d, n), "fuzz-checkpoint.bin"); }

}  // namespace

const std::vector<Target>& targets() {
  static const std::vector<Target> all = {
      {"solve_input", solve_input},         {"grad_input", grad_input},
      {"fit_input", fit_input},             {"exact_input", exact_input},
      {"invert_input", invert_input},       {"formula", formula},
      {"reference_table", reference_table}, {"potential_table", potential_table},
      {"target_density", target_density},   {"checkpoint", checkpoint},
  };
  return all;
}

const Target* find_target(const std::string& name) {
  for (const Target& t : targets())
    if (name == t.name) return &t;
  return nullptr;
}

void run_one(const Target& target, const std::uint8_t* data, std::size_t size) {
  try {
    target.run(data, size);
  } catch (const InputError&) {
  } catch (const NumericalError&) {
  } catch (const OutputError&) {
  } catch (const std::exception& e) {
    std::fprintf(stderr, "fuzz target %s: undocumented exception escaped: %s\n", target.name, e.what());
    std::abort();
  } catch (...) {
    std::fprintf(stderr, "fuzz target %s: a non-standard exception escaped\n", target.name);
    std::abort();
  }
}

std::string checkpoint_seed() {
  FitCheckpointState s;
  s.fingerprint = 0x1234abcdULL;
  s.seconds_before = 1.5;
  s.complete = false;
  FitLogEntry g;
  g.type = FitLogEntry::Type::Gradient;
  g.ok = true;
  g.theta = Eigen::VectorXd::LinSpaced(3, 0.1, 0.3);
  g.loss = 0.25;
  g.gradient = Eigen::VectorXd::Constant(3, -0.5);
  s.log.push_back(g);
  FitLogEntry r;
  r.type = FitLogEntry::Type::ResidualJacobian;
  r.ok = true;
  r.theta = g.theta;
  r.loss = 0.125;
  r.residuals = Eigen::VectorXd::Constant(2, 0.25);
  r.gradient = Eigen::VectorXd::Constant(3, 0.1);
  r.jacobian = Eigen::MatrixXd::Identity(2, 3);
  s.log.push_back(r);
  FitLogEntry bad;
  bad.type = FitLogEntry::Type::Residual;
  bad.theta = g.theta;
  bad.reason = "SCF did not converge";
  s.log.push_back(bad);
  FitIteration it;
  it.iteration = 1;
  it.loss = 0.125;
  it.gradient_norm = 0.2;
  it.seconds = 1.0;
  s.iterations.push_back(it);
  s.rejected = {"theta = (0.1, 0.2, 0.3)"};
  return serialize_checkpoint(s);
}

}  // namespace stillpoint::fuzz
