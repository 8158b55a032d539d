#pragma once
// Internal: a flat byte encoding of numbers, strings and Eigen arrays (the machine's IEEE
// doubles, native byte order), used by the fit checkpoint and by the messages between MPI
// ranks. Doubles travel bit for bit, so a result decoded on another rank equals the original.
#include <Eigen/Dense>
#include <cstdint>
#include <cstring>
#include <functional>
#include <string>
#include <utility>

namespace stillpoint::detail {

// CRC-32 with the reflected IEEE 802.3 polynomial 0xEDB88320 (the one of zlib and PNG).
std::uint32_t crc32(const char* p, std::size_t n);

class ByteWriter {
 public:
  void raw(const void* p, std::size_t n) {
    if (n) out_.append(static_cast<const char*>(p), n);
  }
  void u64(std::uint64_t v) { raw(&v, sizeof v); }
  void u8(std::uint8_t v) { raw(&v, 1); }
  void i64(long long v) { raw(&v, sizeof v); }
  void f64(double v) { raw(&v, sizeof v); }
  void str(const std::string& s) {
    u64(s.size());
    raw(s.data(), s.size());
  }
  void vec(const Eigen::VectorXd& v) {
    u64(static_cast<std::uint64_t>(v.size()));
    raw(v.data(), sizeof(double) * static_cast<std::size_t>(v.size()));
  }
  void mat(const Eigen::MatrixXd& m) {
    u64(static_cast<std::uint64_t>(m.rows()));
    u64(static_cast<std::uint64_t>(m.cols()));
    raw(m.data(), sizeof(double) * static_cast<std::size_t>(m.size()));
  }
  /// Every record ends with the CRC-32 of its bytes, so damage is found where it is.
  void begin_record() { mark_ = out_.size(); }
  void end_record() {
    const std::uint32_t c = crc32(out_.data() + mark_, out_.size() - mark_);
    raw(&c, sizeof c);
  }
  std::string take() { return std::move(out_); }

 private:
  std::string out_;
  std::size_t mark_ = 0;
};

/// Reads what ByteWriter wrote. Every length is checked against the bytes that remain before
/// anything is allocated; on damage `fail(record)` is called and must throw.
class ByteReader {
 public:
  ByteReader(const std::string& b, std::function<void(int record)> fail) : b_(b), fail_(std::move(fail)) {}
  void raw(void* p, std::size_t n) {
    if (n == 0) return;  // empty vectors have no storage
    if (n > b_.size() - pos_) fail();
    std::memcpy(p, b_.data() + pos_, n);
    pos_ += n;
  }
  std::uint64_t u64() {
    std::uint64_t v;
    raw(&v, sizeof v);
    return v;
  }
  std::uint8_t u8() {
    std::uint8_t v;
    raw(&v, 1);
    return v;
  }
  long long i64() {
    long long v;
    raw(&v, sizeof v);
    return v;
  }
  double f64() {
    double v;
    raw(&v, sizeof v);
    return v;
  }
  std::size_t count(std::size_t elem) {
    const std::uint64_t n = u64();
    if (elem && n > (b_.size() - pos_) / elem) fail();
    return static_cast<std::size_t>(n);
  }
  std::string str() {
    const std::size_t n = count(1);
    std::string s(n, '\0');
    raw(s.data(), n);
    return s;
  }
  Eigen::VectorXd vec() {
    const std::size_t n = count(sizeof(double));
    Eigen::VectorXd v(static_cast<Eigen::Index>(n));
    raw(v.data(), sizeof(double) * n);
    return v;
  }
  Eigen::MatrixXd mat() {
    const std::size_t r = count(0), c = count(0);
    if (c && r > (b_.size() - pos_) / sizeof(double) / c) fail();
    Eigen::MatrixXd m(static_cast<Eigen::Index>(r), static_cast<Eigen::Index>(c));
    raw(m.data(), sizeof(double) * r * c);
    return m;
  }
  bool at_end() const { return pos_ == b_.size(); }
  void begin_record() {
    mark_ = pos_;
    ++record_;
  }
  void end_record() {
    const std::uint32_t want = crc32(b_.data() + mark_, pos_ - mark_);
    std::uint32_t got = 0;
    raw(&got, sizeof got);
    if (got != want) fail();
  }
  [[noreturn]] void fail() const {
    fail_(record_);
    throw std::logic_error("ByteReader: the failure handler returned");
  }

 private:
  const std::string& b_;
  std::function<void(int)> fail_;
  std::size_t pos_ = 0, mark_ = 0;
  int record_ = 0;
};

}  // namespace stillpoint::detail
