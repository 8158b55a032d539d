#include "stillpoint/common/errors.hpp"

#include <algorithm>
#include <cctype>

namespace stillpoint {

std::string SourceLocation::describe() const {
  // Built with append: GCC 12 warns falsely (-Wrestrict) on operator+ chains here.
  std::string s = file.empty() ? std::string("<input>") : file;
  if (line > 0) {
    s.append(":").append(std::to_string(line));
    if (column > 0) s.append(":").append(std::to_string(column));
  }
  if (!key.empty()) s.append(": key '").append(key).append("'");
  return s;
}

InputError::InputError(const SourceLocation& where, const std::string& what)
    : std::runtime_error(where.describe() + ": " + what), where_(where) {}

InputError::InputError(const std::string& what) : std::runtime_error(what) {}

NumericalError::NumericalError(const std::string& what, std::vector<std::string> details)
    : std::runtime_error(what), details_(std::move(details)) {}

OutputError::OutputError(const std::string& path, const std::string& what)
    : std::runtime_error(std::string(path).append(": ").append(what)), path_(path) {}

namespace {
std::size_t edit_distance(const std::string& a, const std::string& b) {
  std::vector<std::size_t> prev(b.size() + 1), cur(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) prev[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    cur[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const bool same = std::tolower(static_cast<unsigned char>(a[i - 1])) ==
                        std::tolower(static_cast<unsigned char>(b[j - 1]));
      cur[j] = std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (same ? 0 : 1)});
    }
    std::swap(prev, cur);
  }
  return prev[b.size()];
}
}  // namespace

std::string nearest_word(const std::string& word, const std::vector<std::string>& candidates) {
  std::string best;
  std::size_t best_d = std::string::npos;
  for (const auto& c : candidates) {
    const std::size_t d = edit_distance(word, c);
    if (d < best_d) {
      best_d = d;
      best = c;
    }
  }
  // Suggest only plausible typos, not arbitrary words.
  if (best_d == std::string::npos || best_d > std::max<std::size_t>(2, word.size() / 2)) return {};
  return best;
}

}  // namespace stillpoint
