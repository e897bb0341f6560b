#include "daemon/reading_parser.h"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstring>
#include <system_error>
#include <utility>

#include "daemon/text.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

constexpr std::size_t kMinLineBytes = 64;
constexpr std::size_t kMaxLineBytes = std::size_t{16} << 20;
constexpr std::size_t kExcerptBytes = 48;  // longest quoted excerpt in a report
constexpr int kMaxJsonDepth = 32;          // nesting allowed inside ignored JSON values

constexpr bool IsBlank(char c) { return c == ' ' || c == '\t'; }
// RFC 8259 section 2 whitespace ("\n" cannot occur inside a line).
constexpr bool IsJsonSpace(char c) {
  return c == ' ' || c == '\t' || c == '\r' || c == '\n';
}
constexpr bool IsDigit(char c) { return c >= '0' && c <= '9'; }

// ---- UTF-8 ----

// True for a 2-byte sequence encoding a C1 control, U+0080..U+009F.
bool IsC1Control(const unsigned char* p) { return p[0] == 0xC2 && p[1] < 0xA0; }

// Null if `text` is well-formed UTF-8 without control characters, else why not.
const char* CheckUtf8WithoutControls(std::string_view text) {
  const auto* p = reinterpret_cast<const unsigned char*>(text.data());
  const std::size_t n = text.size();
  std::size_t i = 0;
  while (i < n) {
    // Eight printable ASCII bytes at a time: no high bit, none below 0x20, no DEL.
    if (n - i >= 8) {
      std::uint64_t x;
      std::memcpy(&x, p + i, 8);
      constexpr std::uint64_t kHigh = 0x8080808080808080ULL;
      constexpr std::uint64_t kOnes = 0x0101010101010101ULL;
      const std::uint64_t del = x ^ (0x7F * kOnes);
      if ((x & kHigh) == 0 && ((x - 0x20 * kOnes) & ~x & kHigh) == 0 &&
          ((del - kOnes) & ~del & kHigh) == 0) {
        i += 8;
        continue;
      }
    }
    const unsigned c = p[i];
    if (c < 0x80) {
      if (c < 0x20 || c == 0x7F) return "control character";
      ++i;
      continue;
    }
    const std::size_t length = Utf8SequenceLength(p + i, n - i);
    if (length == 0) return "invalid UTF-8";
    if (length == 2 && IsC1Control(p + i)) return "control character";
    i += length;
  }
  return nullptr;
}

// Appends up to kExcerptBytes of `text` for a report: printable ASCII and
// well-formed non-control UTF-8 are kept, other bytes become '?'.
void AppendExcerpt(std::string_view text, std::string* out) {
  const auto* p = reinterpret_cast<const unsigned char*>(text.data());
  const std::size_t n = text.size();
  std::size_t i = 0;
  while (i < n && i < kExcerptBytes) {
    const unsigned c = p[i];
    if (c >= 0x20 && c < 0x7F) {
      out->push_back(static_cast<char>(c));
      ++i;
      continue;
    }
    const std::size_t length = c < 0x80 ? 0 : Utf8SequenceLength(p + i, n - i);
    if (length == 0 || (length == 2 && IsC1Control(p + i)) ||
        i + length > kExcerptBytes) {
      out->push_back('?');
      ++i;
    } else {
      out->append(text.data() + i, length);
      i += length;
    }
  }
  if (i < n) out->append("...");
}

// ---- Values ----

enum class ValueTextError { kOk, kEmpty, kNotNumber, kNonFinite };

// True if the decimal number in [begin, end) (already known to match
// from_chars' grammar) has magnitude below 1, i.e. an out-of-range result
// underflowed rather than overflowed.
bool MagnitudeBelowOne(const char* begin, const char* end) {
  const char* p = begin;
  if (p < end && (*p == '-' || *p == '+')) ++p;
  std::int64_t leading_exponent = 0;  // decimal exponent of the first nonzero digit
  bool seen_nonzero = false, after_point = false;
  std::int64_t int_digits_after_first = 0;
  std::int64_t zeros_after_point = 0;
  for (; p < end && (IsDigit(*p) || *p == '.'); ++p) {
    if (*p == '.') {
      after_point = true;
      continue;
    }
    if (!seen_nonzero) {
      if (*p != '0') {
        seen_nonzero = true;
        if (after_point) leading_exponent = -(zeros_after_point + 1);
      } else if (after_point) {
        ++zeros_after_point;
      }
    } else if (!after_point) {
      ++int_digits_after_first;
    }
  }
  if (!seen_nonzero) return true;
  if (leading_exponent == 0) leading_exponent = int_digits_after_first;
  std::int64_t exponent = 0;
  if (p < end && (*p == 'e' || *p == 'E')) {
    ++p;
    bool negative = false;
    if (p < end && (*p == '+' || *p == '-')) negative = *p++ == '-';
    for (; p < end && IsDigit(*p); ++p) {
      if (exponent < 1'000'000) exponent = exponent * 10 + (*p - '0');
    }
    if (negative) exponent = -exponent;
  }
  return leading_exponent + exponent < 0;
}

ValueTextError ParseValueText(std::string_view text, double* out) {
  if (text.empty()) return ValueTextError::kEmpty;
  const char* begin = text.data();
  const char* end = begin + text.size();
  if (*begin == '+') {  // from_chars refuses a plus sign; strtod allows one
    ++begin;
    if (begin == end || *begin == '-' || *begin == '+') return ValueTextError::kNotNumber;
  }
  double value = 0.0;
  const auto [ptr, ec] = std::from_chars(begin, end, value, std::chars_format::general);
  if (ec == std::errc::invalid_argument || ptr != end) return ValueTextError::kNotNumber;
  if (ec == std::errc::result_out_of_range) {
    if (!MagnitudeBelowOne(begin, end)) return ValueTextError::kNonFinite;
    value = *begin == '-' ? -0.0 : 0.0;
  }
  if (!std::isfinite(value)) return ValueTextError::kNonFinite;
  *out = value;
  return ValueTextError::kOk;
}

// ---- JSON ----

enum class UnescapeResult { kOk, kBadEscape, kBadSurrogate };

int HexValue(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'a' && c <= 'f') return c - 'a' + 10;
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  return -1;
}

// Reads 4 hex digits at raw[pos..pos+4) into *code.
bool ReadHex4(std::string_view raw, std::size_t pos, unsigned* code) {
  if (raw.size() < pos + 4) return false;
  unsigned v = 0;
  for (std::size_t i = pos; i < pos + 4; ++i) {
    const int h = HexValue(raw[i]);
    if (h < 0) return false;
    v = v * 16 + static_cast<unsigned>(h);
  }
  *code = v;
  return true;
}

void AppendUtf8(unsigned code, std::string* out) {
  if (code < 0x80) {
    out->push_back(static_cast<char>(code));
  } else if (code < 0x800) {
    out->push_back(static_cast<char>(0xC0 | (code >> 6)));
    out->push_back(static_cast<char>(0x80 | (code & 0x3F)));
  } else if (code < 0x10000) {
    out->push_back(static_cast<char>(0xE0 | (code >> 12)));
    out->push_back(static_cast<char>(0x80 | ((code >> 6) & 0x3F)));
    out->push_back(static_cast<char>(0x80 | (code & 0x3F)));
  } else {
    out->push_back(static_cast<char>(0xF0 | (code >> 18)));
    out->push_back(static_cast<char>(0x80 | ((code >> 12) & 0x3F)));
    out->push_back(static_cast<char>(0x80 | ((code >> 6) & 0x3F)));
    out->push_back(static_cast<char>(0x80 | (code & 0x3F)));
  }
}

// Decodes the body of a JSON string (between its quotes, escapes intact) into
// *out (RFC 8259 section 7). A \u escape of a lone surrogate is kBadSurrogate.
UnescapeResult UnescapeJson(std::string_view raw, std::string* out) {
  out->clear();
  std::size_t i = 0;
  while (i < raw.size()) {
    const std::size_t slash = raw.find('\\', i);
    if (slash == std::string_view::npos) {
      out->append(raw.substr(i));
      break;
    }
    out->append(raw.substr(i, slash - i));
    if (slash + 1 >= raw.size()) return UnescapeResult::kBadEscape;
    const char e = raw[slash + 1];
    i = slash + 2;
    switch (e) {
      case '"':
        out->push_back('"');
        break;
      case '\\':
        out->push_back('\\');
        break;
      case '/':
        out->push_back('/');
        break;
      case 'b':
        out->push_back('\b');
        break;
      case 'f':
        out->push_back('\f');
        break;
      case 'n':
        out->push_back('\n');
        break;
      case 'r':
        out->push_back('\r');
        break;
      case 't':
        out->push_back('\t');
        break;
      case 'u': {
        unsigned code;
        if (!ReadHex4(raw, i, &code)) return UnescapeResult::kBadEscape;
        i += 4;
        if (code >= 0xDC00 && code <= 0xDFFF) return UnescapeResult::kBadSurrogate;
        if (code >= 0xD800 && code <= 0xDBFF) {
          unsigned low;
          if (i + 1 >= raw.size() || raw[i] != '\\' || raw[i + 1] != 'u') {
            return UnescapeResult::kBadSurrogate;
          }
          if (!ReadHex4(raw, i + 2, &low)) return UnescapeResult::kBadEscape;
          if (low < 0xDC00 || low > 0xDFFF) return UnescapeResult::kBadSurrogate;
          i += 6;
          code = 0x10000 + ((code - 0xD800) << 10) + (low - 0xDC00);
        }
        AppendUtf8(code, out);
        break;
      }
      default:
        return UnescapeResult::kBadEscape;
    }
  }
  return UnescapeResult::kOk;
}

void SkipJsonSpace(std::string_view s, std::size_t* pos) {
  while (*pos < s.size() && IsJsonSpace(s[*pos])) ++*pos;
}

// *pos at an opening quote. On success *pos is just past the closing quote and
// *body is the text between the quotes.
bool ScanJsonString(std::string_view s, std::size_t* pos, std::string_view* body,
                    bool* has_escape) {
  const std::size_t begin = *pos + 1;
  std::size_t i = begin;
  bool escape = false;
  while (i < s.size()) {
    const char c = s[i];
    if (c == '"') {
      *body = s.substr(begin, i - begin);
      *has_escape = escape;
      *pos = i + 1;
      return true;
    }
    if (c == '\\') {
      escape = true;
      ++i;  // the escaped character cannot end the string
    }
    ++i;
  }
  return false;
}

// A bare JSON token (number, true, false, null; also NaN / Infinity as some
// writers emit them): the run up to a delimiter, checked for plausible
// characters only; callers parse the text itself.
bool ScanJsonToken(std::string_view s, std::size_t* pos, std::string_view* token) {
  const std::size_t begin = *pos;
  std::size_t i = begin;
  while (i < s.size()) {
    const char c = s[i];
    if (IsDigit(c) || (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '-' ||
        c == '+' || c == '.') {
      ++i;
    } else {
      break;
    }
  }
  if (i == begin) return false;
  *token = s.substr(begin, i - begin);
  *pos = i;
  return true;
}

// Skips one JSON value of any kind at *pos (nesting at most kMaxJsonDepth).
bool SkipJsonValue(std::string_view s, std::size_t* pos, int depth) {
  if (*pos >= s.size() || depth > kMaxJsonDepth) return false;
  const char c = s[*pos];
  std::string_view ignored;
  bool escape;
  if (c == '"') return ScanJsonString(s, pos, &ignored, &escape);
  if (c != '{' && c != '[') return ScanJsonToken(s, pos, &ignored);
  const char close = c == '{' ? '}' : ']';
  ++*pos;
  SkipJsonSpace(s, pos);
  if (*pos < s.size() && s[*pos] == close) {
    ++*pos;
    return true;
  }
  while (true) {
    if (close == '}') {
      if (*pos >= s.size() || s[*pos] != '"' ||
          !ScanJsonString(s, pos, &ignored, &escape)) {
        return false;
      }
      SkipJsonSpace(s, pos);
      if (*pos >= s.size() || s[*pos] != ':') return false;
      ++*pos;
      SkipJsonSpace(s, pos);
    }
    if (!SkipJsonValue(s, pos, depth + 1)) return false;
    SkipJsonSpace(s, pos);
    if (*pos >= s.size()) return false;
    if (s[*pos] == close) {
      ++*pos;
      return true;
    }
    if (s[*pos] != ',') return false;
    ++*pos;
    SkipJsonSpace(s, pos);
  }
}

// One of the three known members of a reading object, as found on the line.
struct JsonMember {
  enum class Kind { kAbsent, kString, kToken, kComposite };
  Kind kind = Kind::kAbsent;
  std::string_view text;  // string body (escapes intact) or token
  bool has_escape = false;
};

// ---- CSV ----

struct CsvField {
  std::string_view text;           // without quotes and surrounding blanks
  bool has_doubled_quote = false;  // quoted, with "" inside (needs unquoting)
};

void UnquoteCsv(std::string_view text, std::string* out) {
  out->clear();
  for (std::size_t i = 0; i < text.size(); ++i) {
    out->push_back(text[i]);
    if (text[i] == '"') ++i;  // the second quote of a "" pair
  }
}

constexpr std::string_view kByteOrderMark = "\xEF\xBB\xBF";

}  // namespace

std::string_view ToString(ReadingError reason) {
  switch (reason) {
    case ReadingError::kMalformed:
      return "malformed";
    case ReadingError::kWrongFieldCount:
      return "wrong_field_count";
    case ReadingError::kMissingField:
      return "missing_field";
    case ReadingError::kDuplicateField:
      return "duplicate_field";
    case ReadingError::kBadTime:
      return "bad_time";
    case ReadingError::kTimeOutOfRange:
      return "time_out_of_range";
    case ReadingError::kBadValue:
      return "bad_value";
    case ReadingError::kNonFiniteValue:
      return "non_finite_value";
    case ReadingError::kBadSeriesName:
      return "bad_series_name";
    case ReadingError::kSeriesNameTooLong:
      return "series_name_too_long";
    case ReadingError::kLineTooLong:
      return "line_too_long";
    case ReadingError::kTimeInFuture:
      return "time_in_future";
  }
  return "unknown";
}

std::optional<ReadingError> ReadingErrorFromString(std::string_view text) {
  for (std::size_t i = 0; i < kReadingErrorCount; ++i) {
    const auto reason = static_cast<ReadingError>(i);
    if (ToString(reason) == text) return reason;
  }
  return std::nullopt;
}

bool IsValidSeriesName(std::string_view name, ReadingError* reason) {
  ReadingError why;
  if (name.empty()) {
    why = ReadingError::kBadSeriesName;
  } else if (name.size() > kMaxSeriesNameBytes) {
    why = ReadingError::kSeriesNameTooLong;
  } else if (CheckUtf8WithoutControls(name) != nullptr) {
    why = ReadingError::kBadSeriesName;
  } else {
    return true;
  }
  if (reason != nullptr) *reason = why;
  return false;
}

bool ReadingParserOptions::IsValid(std::string* why) const {
  if (max_line_bytes < kMinLineBytes || max_line_bytes > kMaxLineBytes) {
    if (why != nullptr) *why = "max_line_bytes must be in [64, 16777216]";
    return false;
  }
  return true;
}

ReadingParser::ReadingParser(ReadingParserOptions options, Sink sink, Reporter reporter)
    : options_(options), sink_(std::move(sink)), reporter_(std::move(reporter)) {
  options_.max_line_bytes =
      std::clamp(options_.max_line_bytes, kMinLineBytes, kMaxLineBytes);
  unescaped_.reserve(kMaxSeriesNameBytes * 4);
  detail_.reserve(160);
}

void ReadingParser::Feed(std::string_view bytes) {
  if (bytes.empty()) return;
  counters_.bytes += bytes.size();
  const char* p = bytes.data();
  const char* const end = p + bytes.size();
  if (skipping_ || !pending_.empty()) {
    const auto* newline = static_cast<const char*>(std::memchr(p, '\n', end - p));
    if (newline == nullptr) {
      AppendPending(p, end);
      return;
    }
    AppendPending(p, newline);
    if (skipping_) {
      skipping_ = false;
      ++line_number_;
      ++counters_.lines;
    } else {
      EndLine(pending_);
    }
    pending_.clear();
    p = newline + 1;
  }
  while (p < end) {
    const auto* newline = static_cast<const char*>(std::memchr(p, '\n', end - p));
    if (newline == nullptr) {
      AppendPending(p, end);
      return;
    }
    EndLine(std::string_view(p, static_cast<std::size_t>(newline - p)));
    p = newline + 1;
  }
}

void ReadingParser::Finish() {
  if (skipping_) {
    skipping_ = false;
    ++line_number_;
    ++counters_.lines;
  } else if (!pending_.empty()) {
    EndLine(pending_);
  }
  pending_.clear();
  line_number_ = 0;
}

void ReadingParser::AppendPending(const char* begin, const char* end) {
  if (skipping_ || begin == end) return;
  // A pending line may hold max_line_bytes plus the "\r" of a "\r\n".
  const std::size_t limit = options_.max_line_bytes + 1;
  const std::size_t size = pending_.size() + static_cast<std::size_t>(end - begin);
  if (size > limit || (size == limit && end[-1] != '\r')) {
    pending_.clear();
    skipping_ = true;
    ++line_number_;  // report with the number of the line being skipped
    Report(ReadingError::kLineTooLong,
           "line longer than " + std::to_string(options_.max_line_bytes) + " bytes");
    --line_number_;
    return;
  }
  pending_.append(begin, end);
}

void ReadingParser::EndLine(std::string_view line) {
  ++line_number_;
  ++counters_.lines;
  if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
  if (line.size() > options_.max_line_bytes) {
    Report(ReadingError::kLineTooLong,
           "line longer than " + std::to_string(options_.max_line_bytes) + " bytes");
    return;
  }
  ParseLine(line);
}

void ReadingParser::ParseLine(std::string_view line) {
  if (line_number_ == 1 && line.substr(0, 3) == kByteOrderMark) line.remove_prefix(3);
  std::size_t first = 0;
  while (first < line.size() && IsBlank(line[first])) ++first;
  if (first == line.size()) {
    ++counters_.blank_lines;
    return;
  }
  if (line[first] == '{') {
    ParseJson(line.substr(first));
  } else {
    ParseCsv(line);
  }
}

void ReadingParser::ParseCsv(std::string_view line) {
  CsvField fields[3];
  std::size_t count = 0;
  std::size_t pos = 0;
  const std::size_t n = line.size();
  const char* const data = line.data();
  while (true) {
    while (pos < n && IsBlank(data[pos])) ++pos;
    CsvField field;
    if (pos < n && data[pos] == '"') {
      const std::size_t begin = ++pos;
      while (true) {
        const auto* quote =
            static_cast<const char*>(std::memchr(data + pos, '"', n - pos));
        if (quote == nullptr) {
          Report(ReadingError::kMalformed, "unterminated quoted field");
          return;
        }
        pos = static_cast<std::size_t>(quote - data);
        if (pos + 1 < n && data[pos + 1] == '"') {
          field.has_doubled_quote = true;
          pos += 2;
          continue;
        }
        break;
      }
      field.text = line.substr(begin, pos - begin);
      ++pos;  // the closing quote
      while (pos < n && IsBlank(data[pos])) ++pos;
      if (pos < n && data[pos] != ',') {
        Report(ReadingError::kMalformed, "characters after a closing quote");
        return;
      }
    } else {
      const auto* comma = static_cast<const char*>(std::memchr(data + pos, ',', n - pos));
      const std::size_t field_end =
          comma == nullptr ? n : static_cast<std::size_t>(comma - data);
      std::size_t text_end = field_end;
      while (text_end > pos && IsBlank(data[text_end - 1])) --text_end;
      field.text = line.substr(pos, text_end - pos);
      pos = field_end;
    }
    if (count < 3) fields[count] = field;
    ++count;
    if (pos >= n) break;
    ++pos;  // the comma
  }
  if (count != 3) {
    Report(ReadingError::kWrongFieldCount,
           "expected 3 fields (time,series,value), found " + std::to_string(count));
    return;
  }

  EventTime time = 0;
  const TimeTextError time_error = ParseTimeInto(fields[0].text, &time);
  if (time_error != TimeTextError::kOk) {
    if (fields[0].text == "time" && fields[1].text == "series" &&
        fields[2].text == "value") {
      ++counters_.header_lines;
      return;
    }
    Report(time_error == TimeTextError::kOutOfRange ? ReadingError::kTimeOutOfRange
                                                    : ReadingError::kBadTime,
           Describe(time_error), fields[0].text);
    return;
  }
  std::string_view series = fields[1].text;
  if (fields[1].has_doubled_quote) {
    UnquoteCsv(series, &unescaped_);
    series = unescaped_;
  }
  Deliver(time, series, fields[2].text);
}

void ReadingParser::ParseJson(std::string_view line) {
  // Structure first, so that a malformed line is reported as such whatever
  // its members hold; then the members in the order time, series, value.
  JsonMember members[3];  // time, series, value
  static constexpr std::string_view kNames[3] = {"time", "series", "value"};
  int duplicate = -1;
  std::size_t pos = 1;  // past '{'
  SkipJsonSpace(line, &pos);
  bool closed = false;
  if (pos < line.size() && line[pos] == '}') {
    ++pos;
    closed = true;
  }
  while (!closed) {
    std::string_view key;
    bool key_escaped = false;
    if (pos >= line.size() || line[pos] != '"' ||
        !ScanJsonString(line, &pos, &key, &key_escaped)) {
      Report(ReadingError::kMalformed, "expected a quoted key");
      return;
    }
    if (key_escaped) {
      if (UnescapeJson(key, &time_text_) != UnescapeResult::kOk) {
        Report(ReadingError::kMalformed, "bad escape in a key");
        return;
      }
      key = time_text_;
    }
    int index = -1;
    for (int i = 0; i < 3; ++i) {
      if (key == kNames[i]) index = i;
    }
    SkipJsonSpace(line, &pos);
    if (pos >= line.size() || line[pos] != ':') {
      Report(ReadingError::kMalformed, "expected ':' after a key");
      return;
    }
    ++pos;
    SkipJsonSpace(line, &pos);
    if (index < 0) {
      if (!SkipJsonValue(line, &pos, 0)) {
        Report(ReadingError::kMalformed, "bad JSON value");
        return;
      }
    } else {
      JsonMember member;
      const std::size_t value_begin = pos;
      bool ok;
      if (pos < line.size() && line[pos] == '"') {
        member.kind = JsonMember::Kind::kString;
        ok = ScanJsonString(line, &pos, &member.text, &member.has_escape);
      } else if (pos < line.size() && (line[pos] == '{' || line[pos] == '[')) {
        member.kind = JsonMember::Kind::kComposite;
        ok = SkipJsonValue(line, &pos, 0);
        member.text = line.substr(value_begin, pos - value_begin);
      } else {
        member.kind = JsonMember::Kind::kToken;
        ok = ScanJsonToken(line, &pos, &member.text);
      }
      if (!ok) {
        Report(ReadingError::kMalformed, "bad JSON value");
        return;
      }
      if (members[index].kind != JsonMember::Kind::kAbsent && duplicate < 0)
        duplicate = index;
      members[index] = member;
    }
    SkipJsonSpace(line, &pos);
    if (pos < line.size() && line[pos] == ',') {
      ++pos;
      SkipJsonSpace(line, &pos);
    } else if (pos < line.size() && line[pos] == '}') {
      ++pos;
      closed = true;
    } else {
      Report(ReadingError::kMalformed, "expected ',' or '}'");
      return;
    }
  }
  SkipJsonSpace(line, &pos);
  if (pos != line.size()) {
    Report(ReadingError::kMalformed, "characters after the JSON object");
    return;
  }
  if (duplicate >= 0) {
    Report(ReadingError::kDuplicateField,
           "key \"" + std::string(kNames[duplicate]) + "\" given twice");
    return;
  }
  for (int i = 0; i < 3; ++i) {
    if (members[i].kind == JsonMember::Kind::kAbsent) {
      Report(ReadingError::kMissingField, "no \"" + std::string(kNames[i]) + "\" key");
      return;
    }
  }

  // time: a string (either form) or a number (epoch seconds).
  const JsonMember& time_member = members[0];
  if (time_member.kind == JsonMember::Kind::kComposite) {
    Report(ReadingError::kBadTime, "time must be a string or a number", time_member.text);
    return;
  }
  std::string_view time_text = time_member.text;
  if (time_member.has_escape) {
    if (UnescapeJson(time_text, &time_text_) != UnescapeResult::kOk) {
      Report(ReadingError::kMalformed, "bad escape in time");
      return;
    }
    time_text = time_text_;
  }
  EventTime time = 0;
  const TimeTextError time_error = ParseTimeInto(time_text, &time);
  if (time_error != TimeTextError::kOk) {
    Report(time_error == TimeTextError::kOutOfRange ? ReadingError::kTimeOutOfRange
                                                    : ReadingError::kBadTime,
           Describe(time_error), time_text);
    return;
  }

  // series: a string.
  const JsonMember& series_member = members[1];
  if (series_member.kind != JsonMember::Kind::kString) {
    Report(ReadingError::kBadSeriesName, "series must be a JSON string",
           series_member.text);
    return;
  }
  std::string_view series = series_member.text;
  if (series_member.has_escape) {
    switch (UnescapeJson(series, &unescaped_)) {
      case UnescapeResult::kOk:
        break;
      case UnescapeResult::kBadEscape:
        Report(ReadingError::kMalformed, "bad escape in series");
        return;
      case UnescapeResult::kBadSurrogate:
        Report(ReadingError::kBadSeriesName, "unpaired surrogate escape in series",
               series);
        return;
    }
    series = unescaped_;
  }

  // value: a number, or a string holding one.
  const JsonMember& value_member = members[2];
  if (value_member.kind == JsonMember::Kind::kComposite) {
    Report(ReadingError::kBadValue, "value must be a number", value_member.text);
    return;
  }
  Deliver(time, series, value_member.text);
}

void ReadingParser::Deliver(EventTime time, std::string_view series,
                            std::string_view value_text) {
  if (series.empty()) {
    Report(ReadingError::kBadSeriesName, "empty series name");
    return;
  }
  if (series.size() > kMaxSeriesNameBytes) {
    Report(ReadingError::kSeriesNameTooLong,
           "series name of " + std::to_string(series.size()) + " bytes (at most " +
               std::to_string(kMaxSeriesNameBytes) + ")",
           series);
    return;
  }
  if (const char* why = CheckUtf8WithoutControls(series); why != nullptr) {
    Report(ReadingError::kBadSeriesName, std::string(why) + " in series name", series);
    return;
  }
  if (time > latest_time_) {
    std::string text;
    AppendRfc3339(time, &text);
    Report(ReadingError::kTimeInFuture, "time " + text + " is too far ahead of the clock");
    return;
  }
  double value = 0.0;
  switch (ParseValueText(value_text, &value)) {
    case ValueTextError::kOk:
      break;
    case ValueTextError::kEmpty:
      Report(ReadingError::kBadValue, "empty value");
      return;
    case ValueTextError::kNotNumber:
      Report(ReadingError::kBadValue, "not a number", value_text);
      return;
    case ValueTextError::kNonFinite:
      Report(ReadingError::kNonFiniteValue, "not a finite number", value_text);
      return;
  }
  ++counters_.readings;
  if (sink_) sink_(Reading{time, series, value});
}

void ReadingParser::Report(ReadingError reason, std::string_view message,
                           std::string_view excerpt) {
  ++counters_.rejected;
  ++counters_.rejected_by_reason[static_cast<std::size_t>(reason)];
  if (!reporter_) return;
  detail_.assign(message);
  if (!excerpt.empty()) {
    detail_.append(": \"");
    AppendExcerpt(excerpt, &detail_);
    detail_.push_back('"');
  }
  reporter_(line_number_, reason, detail_);
}

}  // namespace plumbline
