#pragma once
// Internal: how numbers are rendered in every report, table and message. One place, so that a
// value written by one job reads back the same in another and the formats agree.
#include <string>

namespace stillpoint::detail {

/// printf rendering of one double with `spec` ("%.10g", "%.2e", "%8.3f", ...).
std::string printf_number(const char* spec, double v);

/// Shortest text that reads back to the same double (%.17g).
inline std::string g17(double v) { return printf_number("%.17g", v); }
/// Twelve significant digits (%.12g), for values shown beside published ones.
inline std::string g12(double v) { return printf_number("%.12g", v); }
/// Fixed-width scientific with 13 digits (%.12e): the CSV format of every table.
inline std::string e12(double v) { return printf_number("%.12e", v); }
/// Six significant digits (%.6g), for summaries.
inline std::string g6(double v) { return printf_number("%.6g", v); }
/// Terminal column: "% .6e", or "n/a" for a missing (non-finite) value.
std::string sci_or_na(double v);
/// CSV cell: e12, or empty for a missing (non-finite) value.
std::string csv_number(double v);

/// `v` with `digits` significant digits (printf %g), for messages.
std::string format_number(double v, int digits);

}  // namespace stillpoint::detail
