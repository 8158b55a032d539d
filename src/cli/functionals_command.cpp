// `stillpoint functionals`: what the installed libxc offers and whether each functional works.
#include <algorithm>
#include <iostream>

#include "commands.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/check/functional_survey.hpp"

namespace sp = stillpoint;

int run_functionals(const FunctionalsCommandOptions& o) {
  if (o.survey.empty()) {
    // The catalog alone: usable where, or why not.
    for (const sp::LibxcEntry& e : sp::libxc_catalog()) {
      if (!o.only.empty() && std::find(o.only.begin(), o.only.end(), e.name) == o.only.end() &&
          std::find(o.only.begin(), o.only.end(), std::to_string(e.id)) == o.only.end())
        continue;
      const std::string r3 = sp::libxc_refusal(e.id, false), r1 = sp::libxc_refusal(e.id, true);
      std::cout << e.id << "  " << e.name << "  (" << e.family << " " << e.kind << ", " << e.description << "): ";
      if (r3.empty()) std::cout << "usable for atoms\n";
      else if (r1.empty()) std::cout << "usable for line systems\n";
      else std::cout << "refused: " << (e.dimension == 1 ? r1 : r3) << "\n";
    }
    return 0;
  }
  const auto systems = sp::survey_systems(o.survey);
  for (const std::string& want : o.energies_of)
    if (std::none_of(systems.begin(), systems.end(), [&](const auto& s) { return s.label == want; })) {
      std::vector<std::string> labels;
      for (const auto& s : systems) labels.push_back(s.label);
      std::string near = sp::nearest_word(want, labels), all;
      for (const auto& l : labels) all += (all.empty() ? "" : ", ") + l;
      throw sp::InputError("--energies-of: survey '" + o.survey + "' has no system '" + want + "'" +
                           (near.empty() ? "" : " (did you mean '" + near + "'?)") + "; its systems: " + all);
    }
  sp::SurveyOptions opt;
  opt.threads = o.threads;
  int failed = 0, unstable = 0;
  opt.progress = [&](const sp::SurveyRow& r) {
    if (!r.refusal.empty()) {
      if (!o.quiet) std::cerr << "  " << r.entry.name << ": refused\n";
      return;
    }
    for (const auto& x : r.outcomes)
      if (!x.acceptable()) {
        ++failed;
        std::cerr << "  " << r.entry.name << " on " << x.system << ": FAILED: " << x.error << "\n";
      } else if (x.unstable) {
        ++unstable;
        if (!o.quiet) std::cerr << "  " << r.entry.name << " on " << x.system << ": unstable: " << x.error << "\n";
      }
    if (!o.quiet && r.all_converged())
      std::cerr << "  " << r.entry.name << ": converges on " << r.outcomes.size() << " systems"
                << (r.tail_cut > 0 ? " (tail cut " + std::to_string(r.tail_cut) + ")" : std::string()) << "\n";
  };
  const auto rows = sp::survey_libxc(systems, o.only, opt);
  int solved = 0, refused = 0, bad = 0;
  int shaky = 0;
  for (const auto& r : rows) {
    (r.refusal.empty() ? (r.all_converged() ? solved : bad) : refused)++;
    if (r.refusal.empty() && r.all_converged() && r.any_unstable()) ++shaky;
  }
  std::cout << "survey '" << o.survey << "' (" << systems.size() << " systems): " << solved << " functionals converge (" << shaky << " of them unstable on some systems), "
            << refused << " refused, " << bad << " fail (" << failed << " failed solves; " << unstable
            << " solves unstable)\n";
  if (!o.markdown.empty()) sp::write_file_atomically(o.markdown, sp::survey_markdown(rows, o.survey, o.energies_of));
  return bad == 0 ? 0 : 3;
}
