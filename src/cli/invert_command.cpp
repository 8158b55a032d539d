// `stillpoint invert`: the Kohn–Sham potential (and v_xc) behind a target density.
// Files are written only when the inversion succeeded with finite results, each atomically;
// plots are drawn by gnuplot when it is installed (a one-line notice otherwise).
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <iostream>

#include "commands.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/invert/inversion.hpp"

namespace sp = stillpoint;
namespace fs = std::filesystem;

namespace {

bool have_gnuplot() { return std::system("command -v gnuplot >/dev/null 2>&1") == 0; }

std::string quote(const std::string& s) {
  std::string q = "'";
  for (char c : s) q += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return q + "'";
}

// Draws PNG and SVG next to the script: gnuplot writes temporary names, which are renamed
// into place only when it succeeded.
void draw(const std::string& dir, const std::string& stem, const sp::InvertInput& in, const sp::InversionResult& r) {
  const std::string csv = stem + "_inversion.csv", png = stem + "_inversion.png", svg = stem + "_inversion.svg";
  const std::string script = sp::inversion_gnuplot(in, r, csv, png, svg);
  sp::write_file_atomically((fs::path(dir) / (stem + "_inversion.gp")).string(), script);
  if (!have_gnuplot()) {
    std::cerr << "stillpoint: note: gnuplot is not installed, so no plots were drawn (" << stem
              << "_inversion.gp draws them from the CSV)\n";
    return;
  }
  const std::string tmp_png = "." + png + ".tmp", tmp_svg = "." + svg + ".tmp";
  const std::string tmp_script = sp::inversion_gnuplot(in, r, csv, tmp_png, tmp_svg);
  const fs::path tmp_gp = fs::path(dir) / ("." + stem + "_inversion.gp.tmp");
  sp::write_file_atomically(tmp_gp.string(), tmp_script);
  const fs::path log = fs::path(dir) / ("." + stem + "_gnuplot.log");
  const std::string cmd = "cd " + quote(dir) + " && gnuplot " + quote(tmp_gp.filename().string()) + " >" +
                          quote(log.filename().string()) + " 2>&1";
  const int rc = std::system(cmd.c_str());
  std::error_code ec;
  const fs::path a = fs::path(dir) / tmp_png, b = fs::path(dir) / tmp_svg;
  if (rc == 0 && fs::exists(a) && fs::exists(b)) {
    fs::rename(a, fs::path(dir) / png, ec);
    if (!ec) fs::rename(b, fs::path(dir) / svg, ec);
  }
  if (rc != 0 || ec) {
    std::cerr << "stillpoint: warning: gnuplot failed; no plots were drawn (see " << (fs::path(dir) / (stem + "_gnuplot.log")).string()
              << ")\n";
    fs::rename(log, fs::path(dir) / (stem + "_gnuplot.log"), ec);
  } else {
    fs::remove(log, ec);
  }
  fs::remove(a, ec);
  fs::remove(b, ec);
  fs::remove(tmp_gp, ec);
}

}  // namespace

int run_invert(const InvertCommandOptions& o) {
  sp::InvertInput in = sp::read_invert_input(o.input);
  std::vector<double> electrons;
  sp::TargetDensity target;
  const sp::Mesh* mesh_ptr = nullptr;
  sp::Mesh mesh = [&] {
    try {
      electrons = sp::electrons_per_spin(in.system);  // builds the problem: grid and occupation checks
      return in.system.geometry == sp::Geometry::Radial ? sp::Mesh::radial(in.system.grid, in.system.atom.Z)
                                                        : sp::Mesh::line(in.system.grid);
    } catch (const sp::InputError& e) {
      if (!e.where().file.empty()) throw;
      throw sp::InputError(in.system_location, "system '" + in.system.name + "': " + e.what());
    }
  }();
  mesh_ptr = &mesh;
  target = sp::read_target_density(in.target_file, *mesh_ptr, electrons, in.target_location, in.target_column);
  for (const auto& w : target.warnings) std::cerr << "stillpoint: warning: " << w << "\n";
  if (!o.quiet) in.options.progress = [](const std::string& line) { std::cerr << line << "\n"; };
  sp::InversionResult r;
  try {
    r = sp::invert_density(in.system, target.density, in.options, target.covered);
  } catch (const sp::NumericalError& e) {
    throw sp::NumericalError("system '" + in.system.name + "': " + e.what() +
                                 (o.output.empty() ? "" : "; no output files were written"),
                             e.details());
  }
  // Render everything before writing anything, so that a failure leaves no partial set.
  const std::string summary = sp::format_inversion(in, target, r);
  std::string json, csv;
  if (!o.output.empty()) {
    json = sp::inversion_json(in, target, r);
    csv = sp::inversion_csv(in, r);
  }
  std::cout << summary << std::flush;
  if (!o.output.empty()) {
    const std::string stem = in.system.name;
    const fs::path dir(o.output);
    sp::write_files_atomically({{(dir / (stem + "_inversion.csv")).string(), csv}, {(dir / (stem + "_inversion.json")).string(), json}});
    draw(o.output, stem, in, r);
    std::cout << "wrote " << (dir / stem).string() << "_inversion{.json,.csv,.gp"
              << (fs::exists(dir / (stem + "_inversion.png")) ? ",.png,.svg" : "") << "}\n";
  }
  return 0;
}
