// gnuplot scripts for a fit's outputs, and rendering them when gnuplot is installed.
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <sstream>

#include "fit/report_detail.hpp"

namespace stillpoint {

using namespace fit_detail;
namespace fs = std::filesystem;

OutputFiles fit_plot_scripts(const FitWorkflow& wf, const FitResult& r) {
  OutputFiles out;
  const FitSpec& s = wf.spec;
  auto script = [](const std::string& stem, const std::string& body) {
    // Both formats from one plot body; outputs go to temporary names and are renamed by
    // render_plots, so a plot file that exists is complete.
    std::string t = "# gnuplot script written by stillpoint fit; run from this directory: gnuplot " + stem + ".gp\n";
    t += "set datafile separator ','\nset key top right autotitle columnhead\nset grid\n";
    t += "set terminal pngcairo size 900,600 noenhanced font 'sans,11'\nset output '" + stem + ".png.part'\n" + body;
    t += "set terminal svg size 900,600 noenhanced font 'sans,11'\nset output '" + stem + ".svg.part'\nreplot\nunset output\n";
    return t;
  };
  // Loss history.
  {
    std::string body = "set title 'Loss history'\nset xlabel 'iteration'\nset ylabel 'loss (dimensionless loss units)'\nset logscale y\n";
    body += "plot '../history.csv' using 1:2 every ::0 with linespoints lw 2 title 'training loss'";
    if (!s.validation.empty()) body += ", '' using 1:($4 > 0 ? $4 : 1/0) with linespoints lw 2 title 'validation loss'";
    body += "\n";
    out.emplace_back("plots/loss.gp", script("loss", body));
  }
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    if (k >= r.after.solutions.size() || r.after.solutions[k].v_s.empty()) continue;
    const SystemSpec& sp = s.systems[k];
    const bool line = sp.geometry == Geometry::Line;
    const std::string data = "../" + sp.name + "_density.csv";
    std::string body = "set title " + toml_string("Density of " + sp.name) + "\n";
    body += std::string("set xlabel '") + (line ? "x (bohr)" : "r (bohr)") + "'\n";
    body += std::string("set ylabel '") + (line ? "n (electrons/bohr)" : "4 pi r^2 n (electrons/bohr)") + "'\n";
    if (!line) body += "set xrange [0:" + g12(std::min(sp.grid.r_max, 8.0)) + "]\n";
    const int c0 = line ? 2 : 5;
    const bool ref = density_term(s, static_cast<int>(k)) != nullptr;
    body += "plot ";
    if (ref) body += "'" + data + "' using 1:" + std::to_string(c0) + " with lines lw 3 dt 1 title 'reference', ";
    body += "'" + data + "' using 1:" + std::to_string(c0 + 1) + " with lines lw 2 dt 2 title 'initial', '' using 1:" +
            std::to_string(c0 + 2) + " with lines lw 2 title 'fitted'\n";
    out.emplace_back("plots/" + sp.name + "_density.gp", script(sp.name + "_density", body));
    if (line && has_potential_parameters(s, static_cast<int>(k))) {
      std::string pb = "set title " + toml_string("External potential of " + sp.name) +
                       "\nset xlabel 'x (bohr)'\nset ylabel 'v_ext (hartree)'\n";
      pb += "plot '../" + sp.name + "_potential.csv' using 1:2 with lines lw 2 dt 2 title 'initial', '' using 1:3 with lines lw 2 title 'fitted'\n";
      out.emplace_back("plots/" + sp.name + "_potential.gp", script(sp.name + "_potential", pb));
    }
  }
  const auto curves = xc_curves(wf, r);
  if (!curves.empty()) {
    const bool grad = curves.front().gradient;
    std::string body = "set title 'Fitted exchange-correlation model'\n";
    body += grad ? "set xlabel 's (reduced density gradient, dimensionless)'\nset ylabel 'F = e / e_x(LDA) at n = 1 bohr^-3'\n"
                 : "set xlabel 'r_s (bohr)'\nset ylabel 'energy per particle (hartree)'\n";
    body += "plot ";
    // Row ranges of each curve in xc_model.csv (200 rows each, after 2 header lines).
    for (std::size_t c = 0; c < curves.size() && c < 8; ++c) {
      if (curves[c].gradient != grad) continue;
      const std::string every = "every ::" + std::to_string(c * 200) + "::" + std::to_string(c * 200 + 199);
      const std::string lab = curves[c].term + " " + curves[c].label;
      body += std::string(c ? ", " : "") + "'../xc_model.csv' " + every + " using 4:5 with lines lw 2 dt 2 title " +
              toml_string(lab + " initial") + ", '' " + every + " using 4:6 with lines lw 2 title " + toml_string(lab + " fitted");
    }
    body += "\n";
    out.emplace_back("plots/xc_model.gp", script("xc_model", body));
  }
  return out;
}

std::string render_plots(const std::string& dir, const OutputFiles& scripts) {
  if (std::system("command -v gnuplot >/dev/null 2>&1") != 0) return "gnuplot is not installed: no plots (the data are in the CSV files)";
  const fs::path pd = fs::path(dir) / "plots";
  std::string failed;
  for (const auto& [name, text] : scripts) {
    (void)text;
    const std::string stem = fs::path(name).stem().string();
    const std::string cmd = "cd '" + pd.string() + "' && gnuplot '" + stem + ".gp' >'" + stem + ".log' 2>&1";
    if (std::system(cmd.c_str()) != 0) {
      failed += (failed.empty() ? "" : ", ") + stem;
      continue;
    }
    for (const char* ext : {".png", ".svg"}) {
      std::error_code ec;
      fs::rename(pd / (stem + ext + ".part"), pd / (stem + ext), ec);
      if (ec) failed += (failed.empty() ? "" : ", ") + stem + ext;
    }
    std::error_code ec;
    fs::remove(pd / (stem + ".log"), ec);
  }
  return failed.empty() ? "" : "gnuplot failed for: " + failed + " (see plots/*.log)";
}


}  // namespace stillpoint
