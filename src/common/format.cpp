#include "common/format.hpp"

#include <cmath>
#include <cstdio>

namespace stillpoint::detail {

std::string printf_number(const char* spec, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, spec, v);
  return buf;
}

std::string sci_or_na(double v) { return std::isfinite(v) ? printf_number("% .6e", v) : std::string("n/a"); }

std::string csv_number(double v) { return std::isfinite(v) ? e12(v) : std::string(); }

std::string format_number(double v, int digits) {
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.*g", digits, v);
  return buf;
}

}  // namespace stillpoint::detail
