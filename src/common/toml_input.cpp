#include "common/toml_input.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "stillpoint/common/errors.hpp"

namespace stillpoint::detail {

namespace {

std::string join(const std::string& path, const std::string& key) { return path.empty() ? key : path + "." + key; }

}  // namespace

SourceLocation location(const std::string& file, const toml::node& node, const std::string& key) {
  const auto& s = node.source();
  return SourceLocation{file, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), key};
}

SourceLocation key_location(const std::string& file, const toml::table& t, const std::string& path, const std::string& key) {
  if (const toml::node* n = t.get(key)) return location(file, *n, join(path, key));
  return location(file, t, join(path, key));
}

std::string read_text_file(const std::string& path, const std::string& cannot_open) {
  const SourceLocation at{path, 0, 0, ""};
  std::error_code ec;
  const auto st = std::filesystem::status(path, ec);
  if (!ec && std::filesystem::is_directory(st)) throw InputError(at, cannot_open + ": it is a directory, not a file");
  if (!ec && std::filesystem::exists(st) && !std::filesystem::is_regular_file(st))
    throw InputError(at, cannot_open + ": not a regular file (devices, pipes and sockets are not read)");
  if (!ec && std::filesystem::is_regular_file(st)) {
    const auto size = std::filesystem::file_size(path, ec);
    if (!ec && size > static_cast<std::uintmax_t>(kMaxInputFileBytes))
      throw InputError(at, "the file is " + format_number(static_cast<double>(size) / (1 << 20), 4) +
                               " MB, above the input file limit of " + std::to_string(kMaxInputFileBytes >> 20) + " MB");
  }
  std::ifstream f(path, std::ios::binary);
  if (!f) throw InputError(at, cannot_open);
  std::stringstream ss;
  ss << f.rdbuf();
  return ss.str();
}

std::istringstream open_table(const std::string& path, const std::string& cannot_open, SourceLocation where) {
  std::string text;
  try {
    text = read_text_file(path, cannot_open);
  } catch (const InputError& e) {
    if (where.file.empty()) throw;
    throw InputError(where, e.what());
  }
  if (text.rfind("\xEF\xBB\xBF", 0) == 0) text.erase(0, 3);
  return std::istringstream(text);
}

std::string printable(const std::string& s, std::size_t max_chars) {
  std::string out;
  for (unsigned char ch : s) {
    if (out.size() >= max_chars) {
      out += "...";
      break;
    }
    if (ch >= 0x20 && ch < 0x7f) {
      out += static_cast<char>(ch);
    } else {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\x%02X", ch);
      out += buf;
    }
  }
  return out;
}

std::string preview_list(const std::vector<double>& v, int digits) {
  std::string out = "[";
  const std::size_t n = v.size();
  for (std::size_t i = 0; i < n; ++i) {
    if (n > 8 && i == 5) {
      out += ", ... , " + format_number(v.back(), digits) + "] (" + std::to_string(n) + " values)";
      return out;
    }
    out += (i ? ", " : "") + format_number(v[i], digits);
  }
  return out + "]";
}

toml::table parse_toml(const std::string& text, const std::string& name, const std::string& prefix) {
  try {
    return toml::parse(text, std::string{name});
  } catch (const toml::parse_error& e) {
    const auto& s = e.source();
    throw InputError(SourceLocation{name, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), ""},
                     prefix + std::string(e.description()));
  }
}

std::vector<std::string> concat(std::vector<std::string> a, const std::vector<std::string>& b) {
  a.insert(a.end(), b.begin(), b.end());
  return a;
}

void check_keys(const std::string& file, const toml::table& t, const std::string& path, const std::vector<std::string>& allowed,
                bool list_valid) {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
    const std::string near = nearest_word(key, allowed);
    std::string message = "unknown key" + (near.empty() ? std::string() : "; did you mean '" + near + "'?");
    if (list_valid) {
      std::string valid;
      for (const auto& a : allowed) valid += (valid.empty() ? "" : ", ") + a;
      message += " (valid here: " + valid + ")";
    }
    throw InputError(location(file, v, join(path, key)), message);
  }
}

void refuse_renamed_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& old_key,
                        const std::string& new_key, const std::string& values) {
  const toml::node* n = t.get(old_key);
  if (!n) return;
  std::string message = "'" + old_key + "' was renamed: use '" + new_key + "'";
  if (!values.empty()) message.append(" (").append(values).append(")");
  throw InputError(location(file, *n, join(path, old_key)), message);
}

double finite_number(const std::string& file, const toml::node& n, const std::string& key) {
  // value<double>() is also empty for integers beyond 2^53, which a double cannot hold exactly.
  const auto v = n.value<double>();
  if (!n.is_number() || !v || !std::isfinite(*v)) throw InputError(location(file, n, key), "expected a finite number");
  return *v;
}

double number_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, double def) {
  const toml::node* n = t.get(key);
  return n ? finite_number(file, *n, join(path, key)) : def;
}

int int_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, int def, int lo,
            int hi, const std::string& message) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  const auto* i = n->as_integer();
  if (!i || i->get() < lo || i->get() > hi) throw InputError(location(file, *n, join(path, key)), message);
  return static_cast<int>(i->get());
}

bool bool_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, bool def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (const auto* b = n->as_boolean()) return b->get();
  throw InputError(location(file, *n, join(path, key)), "expected true or false");
}

std::string string_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key,
                       const std::string& def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (const auto* s = n->as_string()) return s->get();
  throw InputError(location(file, *n, join(path, key)), "expected a string");
}

}  // namespace stillpoint::detail
