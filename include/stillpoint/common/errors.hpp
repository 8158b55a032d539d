#pragma once
// Error types shared by the library and the command line.
//
// Three tiers, mirroring how users must react:
//   InputError      the user's file or options are wrong; fix the input (CLI exit code 2)
//   NumericalError  the input was valid but a computation failed, e.g. an SCF that did not
//                   converge; change tolerances, mixing or grid (CLI exit code 3)
//   OutputError     the results could not be written (disk full, unwritable folder); the
//                   input and the computation were fine (CLI exit code 5)
//   std::logic_error  a broken invariant inside stillpoint: a bug, please report it.
#include <stdexcept>
#include <string>
#include <vector>

namespace stillpoint {

/// Where in an input file something was found. line/column are 1-based; 0 means unknown.
struct SourceLocation {
  std::string file;
  int line = 0;
  int column = 0;
  /// Dotted key path, e.g. "system[0].grid.degree".
  std::string key;

  /// "file:line:column: key" with the parts that are known.
  std::string describe() const;
};

class InputError : public std::runtime_error {
 public:
  InputError(const SourceLocation& where, const std::string& what);
  explicit InputError(const std::string& what);
  const SourceLocation& where() const noexcept { return where_; }

 private:
  SourceLocation where_;
};

class NumericalError : public std::runtime_error {
 public:
  explicit NumericalError(const std::string& what, std::vector<std::string> details = {});
  /// Extra lines (for example the SCF residual history), one per entry.
  const std::vector<std::string>& details() const noexcept { return details_; }

 private:
  std::vector<std::string> details_;
};

/// An output file could not be written; `path` names it. Never an input error: the run was
/// valid and may be repeated as it is once there is room.
class OutputError : public std::runtime_error {
 public:
  OutputError(const std::string& path, const std::string& what);
  const std::string& path() const noexcept { return path_; }

 private:
  std::string path_;
};

/// Returns the candidate closest to `word` by edit distance (empty if none is close).
std::string nearest_word(const std::string& word, const std::vector<std::string>& candidates);

}  // namespace stillpoint
