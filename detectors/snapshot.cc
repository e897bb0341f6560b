#include "detectors/snapshot.h"

#include <array>
#include <bit>
#include <cmath>
#include <cstring>

namespace plumbline {
namespace {

constexpr std::array<std::uint32_t, 256> MakeCrc32cTable() {
  std::array<std::uint32_t, 256> table{};
  for (std::uint32_t i = 0; i < 256; ++i) {
    std::uint32_t c = i;
    for (int k = 0; k < 8; ++k) c = (c & 1u) ? (c >> 1) ^ 0x82F63B78u : c >> 1;
    table[i] = c;
  }
  return table;
}

constexpr std::array<std::uint32_t, 256> kCrc32cTable = MakeCrc32cTable();

#if defined(__x86_64__)
// SSE4.2's crc32 computes exactly this CRC (Castagnoli, reflected), eight
// bytes per instruction.
__attribute__((target("sse4.2"))) std::uint32_t Crc32cInstruction(std::string_view bytes,
                                                                  std::uint32_t crc) {
  std::uint64_t c = ~crc;
  const char* p = bytes.data();
  std::size_t n = bytes.size();
  for (; n >= 8; n -= 8, p += 8) {
    std::uint64_t word;
    std::memcpy(&word, p, 8);
    c = __builtin_ia32_crc32di(c, word);
  }
  auto c32 = static_cast<std::uint32_t>(c);
  for (; n > 0; --n, ++p) c32 = __builtin_ia32_crc32qi(c32, static_cast<unsigned char>(*p));
  return ~c32;
}

const bool kHasCrc32Instruction = [] {
  __builtin_cpu_init();  // may run before libgcc's own constructor has
  return __builtin_cpu_supports("sse4.2") != 0;
}();
#else
const bool kHasCrc32Instruction = false;
#endif

}  // namespace

namespace crc32c_internal {

std::uint32_t Portable(std::string_view bytes, std::uint32_t crc) {
  crc = ~crc;
  for (unsigned char b : bytes) crc = kCrc32cTable[(crc ^ b) & 0xFFu] ^ (crc >> 8);
  return ~crc;
}

bool UsesInstruction() { return kHasCrc32Instruction; }

}  // namespace crc32c_internal

std::uint32_t Crc32c(std::string_view bytes, std::uint32_t crc) {
#if defined(__x86_64__)
  if (kHasCrc32Instruction) return Crc32cInstruction(bytes, crc);
#endif
  return crc32c_internal::Portable(bytes, crc);
}

void SnapshotWriter::Tag(std::string_view four_letters) {
  bytes_.append(four_letters.substr(0, 4));
}

template <int kBytes>
void SnapshotWriter::LittleEndian(std::uint64_t v) {
  char bytes[kBytes];
  for (int i = 0; i < kBytes; ++i) bytes[i] = static_cast<char>(v >> (8 * i));
  bytes_.append(bytes, sizeof bytes);
}

void SnapshotWriter::U32(std::uint32_t v) { LittleEndian<4>(v); }

void SnapshotWriter::U64(std::uint64_t v) { LittleEndian<8>(v); }

void SnapshotWriter::F64(double v) { U64(std::bit_cast<std::uint64_t>(v)); }

void SnapshotWriter::String(std::string_view v) {
  U64(v.size());
  bytes_.append(v);
}

void SnapshotWriter::Doubles(const double* values, std::size_t count) {
  for (std::size_t i = 0; i < count; ++i) F64(values[i]);
}

void SnapshotWriter::DoubleVector(const std::vector<double>& v) {
  U64(v.size());
  Doubles(v.data(), v.size());
}

void SnapshotWriter::FloatVector(const std::vector<float>& v) {
  U64(v.size());
  for (float x : v) F64(x);
}

void SnapshotWriter::I64Vector(const std::vector<std::int64_t>& v) {
  U64(v.size());
  for (std::int64_t x : v) I64(x);
}

void SnapshotWriter::OptionalI64(const std::optional<std::int64_t>& v) {
  Bool(v.has_value());
  if (v) I64(*v);
}

Status SnapshotReader::Fail(std::string why) {
  if (status_.ok()) {
    status_ = Status::Corruption(why + " (at byte " + std::to_string(at_) + ")");
  }
  at_ = bytes_.size();
  return status_;
}

bool SnapshotReader::Take(std::size_t n, const char** out) {
  if (!status_.ok()) return false;
  if (bytes_.size() - at_ < n) {
    Fail("state ends early");
    return false;
  }
  *out = bytes_.data() + at_;
  at_ += n;
  return true;
}

bool SnapshotReader::NextTagIs(std::string_view four_letters) const {
  return status_.ok() && remaining() >= 4 &&
         bytes_.substr(at_, 4) == four_letters.substr(0, 4);
}

bool SnapshotReader::Tag(std::string_view four_letters) {
  const char* p = nullptr;
  if (!Take(4, &p)) return false;
  if (std::string_view(p, 4) != four_letters.substr(0, 4)) {
    Fail("expected state '" + std::string(four_letters) + "', found '" +
         std::string(p, 4) + "'");
    return false;
  }
  return true;
}

std::uint8_t SnapshotReader::U8() {
  const char* p = nullptr;
  return Take(1, &p) ? static_cast<std::uint8_t>(*p) : 0;
}

bool SnapshotReader::Bool() {
  const std::uint8_t v = U8();
  if (v > 1) Fail("a flag is neither 0 nor 1");
  return v == 1;
}

std::uint32_t SnapshotReader::U32() {
  const char* p = nullptr;
  if (!Take(4, &p)) return 0;
  std::uint32_t v = 0;
  for (int i = 0; i < 4; ++i)
    v |= std::uint32_t{static_cast<std::uint8_t>(p[i])} << (8 * i);
  return v;
}

std::uint64_t SnapshotReader::U64() {
  const char* p = nullptr;
  if (!Take(8, &p)) return 0;
  std::uint64_t v = 0;
  for (int i = 0; i < 8; ++i)
    v |= std::uint64_t{static_cast<std::uint8_t>(p[i])} << (8 * i);
  return v;
}

double SnapshotReader::F64() { return std::bit_cast<double>(U64()); }

std::size_t SnapshotReader::Count(std::size_t item_bytes) {
  const std::uint64_t n = U64();
  if (!ok()) return 0;
  if (item_bytes > 0 && n > remaining() / item_bytes) {
    Fail("a length of " + std::to_string(n) + " runs past the end");
    return 0;
  }
  return static_cast<std::size_t>(n);
}

std::int64_t SnapshotReader::Counter(std::string_view what) {
  const std::int64_t v = I64();
  if (v < 0 || v > kMaxCounter) {
    Fail(std::string(what) + " " + std::to_string(v) + " is not a count");
    return 0;
  }
  return v;
}

std::int64_t SnapshotReader::Time(std::string_view what) {
  const std::int64_t v = I64();
  if (v < -kMaxTime || v > kMaxTime) {
    Fail(std::string(what) + " " + std::to_string(v) + " is out of the time range");
    return 0;
  }
  return v;
}

double SnapshotReader::Finite(std::string_view what) {
  const double v = F64();
  if (!std::isfinite(v)) {
    Fail(std::string(what) + " is not finite");
    return 0.0;
  }
  return v;
}

double SnapshotReader::NonNegative(std::string_view what) {
  const double v = Finite(what);
  if (v < 0.0) {
    Fail(std::string(what) + " is negative");
    return 0.0;
  }
  return v;
}

void SnapshotReader::FiniteDoubles(double* values, std::size_t count,
                                   std::string_view what) {
  Doubles(values, count);
  for (std::size_t i = 0; i < count && ok(); ++i) {
    if (!std::isfinite(values[i])) {
      Fail(std::string(what) + " " + std::to_string(i) + " is not finite");
    }
  }
}

std::size_t SnapshotReader::BoundedCount(std::size_t item_bytes, std::size_t most,
                                         std::string_view what) {
  const std::size_t n = Count(item_bytes);
  if (n > most) {
    Fail(std::string(what) + ": " + std::to_string(n) + " items, at most " +
         std::to_string(most));
    return 0;
  }
  return n;
}

std::string SnapshotReader::String() { return std::string(StringView()); }

std::string_view SnapshotReader::StringView() {
  const std::size_t n = Count(1);
  const char* p = nullptr;
  if (!Take(n, &p)) return {};
  return std::string_view(p, n);
}

void SnapshotReader::Doubles(double* values, std::size_t count) {
  for (std::size_t i = 0; i < count; ++i) values[i] = F64();
}

std::vector<double> SnapshotReader::DoubleVector() {
  std::vector<double> v(Count(8));
  Doubles(v.data(), v.size());
  return v;
}

std::vector<std::int64_t> SnapshotReader::I64Vector() {
  std::vector<std::int64_t> v(Count(8));
  for (auto& x : v) x = I64();
  return v;
}

std::optional<std::int64_t> SnapshotReader::OptionalI64() {
  if (!Bool()) return std::nullopt;
  return I64();
}

}  // namespace plumbline
