// SnapshotWriter and SnapshotReader: the byte encoding of a series' state in
// a checkpoint, and Crc32c, the checksum that guards it. Each stateful class
// writes its own state beside its code (`void Save(SnapshotWriter&) const`,
// `Status Load(SnapshotReader&)`); a class's Load runs on an object built from
// the same options (the profile's design) and overwrites its state only.
//
// Encoding: little-endian fixed-width integers, doubles as their IEEE-754 bit
// patterns (so a restored series computes exactly what the saved one would
// have), strings and arrays as a u64 length then the items. A class opens its
// part with a four-letter tag, so a reader that has lost its place (a format
// mismatch) fails at once with the tag it expected instead of reading
// nonsense. The reader never reads past its end, and its first failure is
// sticky: later reads return zeros and status() keeps the first reason.
//
// Not thread-safe; one writer or reader per thread.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "detectors/status.h"

namespace plumbline {

// CRC-32C (Castagnoli, reflected polynomial 0x82F63B78), as iSCSI and ext4
// use it. Chain calls by passing the previous result as `crc`.
// On x86-64 processors with SSE4.2 it runs on the processor's crc32
// instruction (about 20 times faster than the table: checkpoints are read and
// written whole); elsewhere a byte table.
std::uint32_t Crc32c(std::string_view bytes, std::uint32_t crc = 0);

namespace crc32c_internal {
// The byte-table computation, on every processor (tests compare the two).
std::uint32_t Portable(std::string_view bytes, std::uint32_t crc);
// Whether Crc32c uses the crc32 instruction here.
bool UsesInstruction();
}  // namespace crc32c_internal

class SnapshotWriter {
 public:
  void Tag(std::string_view four_letters);
  void U8(std::uint8_t v) { bytes_.push_back(static_cast<char>(v)); }
  void Bool(bool v) { U8(v ? 1 : 0); }
  void U32(std::uint32_t v);
  void U64(std::uint64_t v);
  void I64(std::int64_t v) { U64(static_cast<std::uint64_t>(v)); }
  void F64(double v);
  void String(std::string_view v);
  void Doubles(const double* values, std::size_t count);  // count itself not written
  void DoubleVector(const std::vector<double>& v);
  // Written as DoubleVector writes the same values widened (read back with it).
  void FloatVector(const std::vector<float>& v);
  void I64Vector(const std::vector<std::int64_t>& v);
  void OptionalI64(const std::optional<std::int64_t>& v);

  const std::string& bytes() const { return bytes_; }
  // The bytes written, leaving the writer empty.
  std::string Take() {
    std::string taken = std::move(bytes_);
    bytes_.clear();
    return taken;
  }
  // Empties the writer but keeps its buffer, for the next state of the same
  // size (a checkpoint writes a million).
  void Clear() { bytes_.clear(); }
  void Reserve(std::size_t bytes) { bytes_.reserve(bytes); }

 private:
  // The low kBytes bytes of v, least significant first, in one append.
  template <int kBytes>
  void LittleEndian(std::uint64_t v);
  std::string bytes_;
};

class SnapshotReader {
 public:
  explicit SnapshotReader(std::string_view bytes) : bytes_(bytes) {}

  // Reads a tag; a different one is a failure naming both.
  bool Tag(std::string_view four_letters);
  // Whether the next four bytes are this tag, without reading them (a layout
  // that changed keeps its old tag and gets a new one).
  bool NextTagIs(std::string_view four_letters) const;
  std::uint8_t U8();
  bool Bool();
  std::uint32_t U32();
  std::uint64_t U64();
  std::int64_t I64() { return static_cast<std::int64_t>(U64()); }
  double F64();
  std::string String();
  // The same string as a view into the reader's bytes, valid while they are
  // (a checkpoint's records are read so, without a copy of each).
  std::string_view StringView();
  void Doubles(double* values, std::size_t count);
  std::vector<double> DoubleVector();
  std::vector<std::int64_t> I64Vector();
  std::optional<std::int64_t> OptionalI64();
  // A length read before `count` items of `item_bytes` each: fails (and
  // returns 0) when fewer bytes than that are left, so a corrupted length
  // cannot make a reader allocate without bound.
  std::size_t Count(std::size_t item_bytes);

  // Checked reads, for the fields an update relies on: each fails (and
  // returns 0) when the value is out of its range, naming `what`, so that a
  // forged state that passed its checksum is refused by Load rather than
  // overflowing a count or a time difference later.
  static constexpr std::int64_t kMaxCounter = std::int64_t{1} << 53;
  static constexpr std::int64_t kMaxTime = std::int64_t{1} << 61;
  // A count (readings, alarms, a run length): in [0, kMaxCounter].
  std::int64_t Counter(std::string_view what);
  // An event time: |t| <= kMaxTime, so the difference of two fits an int64.
  std::int64_t Time(std::string_view what);
  // A finite double; and one that is also >= 0 (sums of squares, weights).
  double Finite(std::string_view what);
  double NonNegative(std::string_view what);
  // `count` doubles that must all be finite (coefficients, means).
  void FiniteDoubles(double* values, std::size_t count, std::string_view what);
  // A length of at most `most` items (a ring, a sample, a buffer whose size
  // the code bounds), checked like Count before anything is allocated.
  std::size_t BoundedCount(std::size_t item_bytes, std::size_t most, std::string_view what);

  // Records a failure (the first one stays); returns it for `return r.Fail(...)`.
  Status Fail(std::string why);
  bool ok() const { return status_.ok(); }
  const Status& status() const { return status_; }
  bool AtEnd() const { return at_ == bytes_.size(); }
  std::size_t remaining() const { return bytes_.size() - at_; }

 private:
  bool Take(std::size_t n, const char** out);

  std::string_view bytes_;
  std::size_t at_ = 0;
  Status status_;
};

}  // namespace plumbline
