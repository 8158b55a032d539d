#include "parallel/distribute.hpp"

#include <stdexcept>

#include "stillpoint/common/errors.hpp"

namespace stillpoint::detail {

namespace {
enum class ErrorKind : std::uint8_t { Input = 0, Numerical = 1, Output = 2, Logic = 3, Other = 4 };

std::string without_prefix(const std::string& s, const std::string& prefix) {
  return s.rfind(prefix, 0) == 0 ? s.substr(prefix.size()) : s;
}
}  // namespace

// The kinds are those the command line maps to exit codes; an InputError's message already
// carries its location, so it is rebuilt from the message alone.
void write_error(ByteWriter& w, const std::exception_ptr& e) {
  try {
    std::rethrow_exception(e);
  } catch (const InputError& x) {
    w.u8(static_cast<std::uint8_t>(ErrorKind::Input));
    const SourceLocation& at = x.where();
    const bool located = !at.file.empty() || at.line || !at.key.empty();
    w.str(located ? without_prefix(x.what(), at.describe() + ": ") : x.what());
    w.u8(located ? 1 : 0);
    w.str(at.file);
    w.i64(at.line);
    w.i64(at.column);
    w.str(at.key);
  } catch (const NumericalError& x) {
    w.u8(static_cast<std::uint8_t>(ErrorKind::Numerical));
    w.str(x.what());
    w.u64(x.details().size());
    for (const auto& d : x.details()) w.str(d);
  } catch (const OutputError& x) {
    w.u8(static_cast<std::uint8_t>(ErrorKind::Output));
    w.str(without_prefix(x.what(), x.path() + ": "));
    w.str(x.path());
  } catch (const std::logic_error& x) {
    w.u8(static_cast<std::uint8_t>(ErrorKind::Logic));
    w.str(x.what());
  } catch (const std::exception& x) {
    w.u8(static_cast<std::uint8_t>(ErrorKind::Other));
    w.str(x.what());
  } catch (...) {
    w.u8(static_cast<std::uint8_t>(ErrorKind::Other));
    w.str("unknown exception");
  }
}

std::exception_ptr read_error(ByteReader& r) {
  const auto kind = static_cast<ErrorKind>(r.u8());
  const std::string what = r.str();
  switch (kind) {
    case ErrorKind::Input: {
      const bool located = r.u8() != 0;
      SourceLocation at;
      at.file = r.str();
      at.line = static_cast<int>(r.i64());
      at.column = static_cast<int>(r.i64());
      at.key = r.str();
      return located ? std::make_exception_ptr(InputError(at, what)) : std::make_exception_ptr(InputError(what));
    }
    case ErrorKind::Numerical: {
      std::vector<std::string> details(r.count(8));
      for (auto& d : details) d = r.str();
      return std::make_exception_ptr(NumericalError(what, std::move(details)));
    }
    case ErrorKind::Output: {
      const std::string path = r.str();
      return std::make_exception_ptr(OutputError(path, what));
    }
    case ErrorKind::Logic:
      return std::make_exception_ptr(std::logic_error(what));
    case ErrorKind::Other:
      return std::make_exception_ptr(std::runtime_error(what));
  }
  throw std::logic_error("message between ranks: unknown error kind");
}

ByteReader message_reader(const std::string& bytes) {
  return ByteReader(bytes, [](int) -> void { throw std::logic_error("a message between MPI ranks is truncated"); });
}

}  // namespace stillpoint::detail
