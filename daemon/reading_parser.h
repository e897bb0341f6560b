// The incremental line parser that every input (TCP, HTTP bodies, files, later
// MQTT and Kafka) feeds its bytes through. It does no I/O: callers hand it byte
// chunks split anywhere, and it hands back complete readings to a sink and bad
// lines to a reporter. Not thread-safe: one parser per connection or file.
//
// Input contract (DESIGN.md, "Readings")
// --------------------------------------
// One reading per line; lines end with "\n" or "\r\n" (a lone "\r" is not a
// line end). Lines that are empty or hold only spaces and tabs are skipped, as
// is a UTF-8 byte order mark at the very start of a stream. Two forms, which
// may mix line by line (a line whose first non-blank byte is '{' is JSON):
//
//   CSV   time,series,value
//         Exactly three fields. Any field may be double-quoted RFC 4180 style
//         ("" inside stands for one quote), so series names may hold commas.
//         Spaces and tabs around a field are dropped; inside quotes they are
//         kept. A quoted field cannot span lines. A line whose three fields are
//         exactly `time`, `series`, `value` is a header and is skipped wherever
//         it appears (so concatenated files work).
//   JSON  {"time": "2026-03-01T12:00:00Z", "series": "a/b", "value": 12.5}
//         One object per line; keys in any order; RFC 8259 whitespace and
//         string escapes (including \uXXXX and surrogate pairs). `time` is a
//         JSON string (either time form) or a JSON number of epoch seconds.
//         `value` is a JSON number or a string holding one. Other keys are
//         allowed and ignored (their values must still be well-formed JSON); a
//         repeated time/series/value key is refused.
//
//   time    RFC 3339 or Unix epoch seconds; see detectors/time_format.h for
//           the exact grammar, the microsecond flooring and leap seconds.
//   series  non-empty, at most kMaxSeriesNameBytes bytes of well-formed UTF-8
//           (no overlong forms, no surrogates, nothing above U+10FFFF) with no
//           control characters (C0 U+0000-U+001F, DEL U+007F, C1 U+0080-U+009F).
//           The length counts bytes after unquoting / unescaping.
//   value   a finite number: optional sign, digits, optional fraction and
//           exponent (std::from_chars, so locale-independent). NaN, infinities
//           (also JSON's bare NaN / Infinity tokens), values that overflow a
//           double, empty text and trailing characters are refused; values
//           that underflow become a zero of the same sign.
//
// Each line yields exactly one of: a reading, a skip (blank or header), or one
// report naming the first thing wrong with it. A bad line never affects the
// next one.
//
// Speed: lines lying wholly inside a fed chunk are parsed in place (no copy);
// only a line split across chunks is gathered in an internal buffer. After the
// first few lines no allocation happens per line, except when the sink or
// reporter allocates.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <string_view>

#include "detectors/event_time.h"

namespace plumbline {

inline constexpr std::size_t kMaxSeriesNameBytes = 256;

// One parsed reading. `series` points into the parser's buffers or the caller's
// chunk and is valid only during the sink call: copy it to keep it.
struct Reading {
  EventTime time = 0;
  std::string_view series;
  double value = 0.0;
};

// Why a line was refused.
enum class ReadingError {
  kMalformed,        // not CSV or JSON of the expected shape (bad quotes, bad JSON)
  kWrongFieldCount,  // a CSV line with other than three fields
  kMissingField,     // a JSON object without time, series or value
  kDuplicateField,   // a JSON object naming time, series or value twice
  kBadTime,  // time text that is neither RFC 3339 nor epoch seconds, or no such date
  kTimeOutOfRange,     // a well-formed time outside years 0001-9999
  kBadValue,           // empty, not a number, or trailing characters
  kNonFiniteValue,     // NaN, an infinity, or a number that overflows a double
  kBadSeriesName,      // empty, invalid UTF-8, or a control character
  kSeriesNameTooLong,  // more than kMaxSeriesNameBytes bytes
  kLineTooLong,        // longer than ReadingParserOptions::max_line_bytes
  kTimeInFuture,       // later than the parser's latest_time (set_latest_time)
};
inline constexpr std::size_t kReadingErrorCount = 12;

// "malformed", "wrong_field_count", "missing_field", "duplicate_field",
// "bad_time", "time_out_of_range", "bad_value", "non_finite_value",
// "bad_series_name", "series_name_too_long", "line_too_long",
// "time_in_future"; and back
// (nullopt for unknown text).
std::string_view ToString(ReadingError reason);
std::optional<ReadingError> ReadingErrorFromString(std::string_view text);

// Whether `name` may be a series name (rules above). On false, *reason (if not
// null) is kBadSeriesName or kSeriesNameTooLong. Cheap; usable by any input.
bool IsValidSeriesName(std::string_view name, ReadingError* reason = nullptr);

struct ReadingParserOptions {
  // Longest accepted line in bytes, not counting its "\n" or "\r\n". A longer
  // line is skipped up to its end and reported once, as soon as it is known to
  // be too long; this bounds the memory one connection can pin.
  std::size_t max_line_bytes = 4096;

  // Rule: max_line_bytes in [64, 16777216] (room for a reading with a long
  // series name; at most 16 MiB per parser).
  bool IsValid(std::string* why) const;
};

// Running totals since construction (they survive Finish()), for metrics.
struct ReadingParserCounters {
  std::uint64_t bytes = 0;     // bytes fed
  std::uint64_t lines = 0;     // lines ended (by "\n" or by Finish), whatever their fate
  std::uint64_t readings = 0;  // readings delivered to the sink
  std::uint64_t blank_lines = 0;   // empty or whitespace-only lines skipped
  std::uint64_t header_lines = 0;  // CSV header lines skipped
  std::uint64_t rejected = 0;      // lines reported, the sum of by_reason
  std::array<std::uint64_t, kReadingErrorCount>
      rejected_by_reason{};  // index: ReadingError

  std::uint64_t Rejected(ReadingError reason) const {
    return rejected_by_reason[static_cast<std::size_t>(reason)];
  }
};

class ReadingParser {
 public:
  // Called once per reading, in input order.
  using Sink = std::function<void(const Reading& reading)>;
  // Called once per refused line: its 1-based line number within the current
  // stream, the reason, and a short printable detail (at most ~120 bytes;
  // quoted excerpts have unprintable bytes replaced by '?'). The detail is valid
  // only during the call.
  using Reporter = std::function<void(std::uint64_t line, ReadingError reason,
                                      std::string_view detail)>;

  // Precondition: options.IsValid(). (An out-of-range max_line_bytes is clamped
  // into its valid range.) The reporter may be empty; counters still count.
  ReadingParser(ReadingParserOptions options, Sink sink, Reporter reporter = nullptr);

  // Parses the complete lines in `bytes`, carrying any unterminated tail over
  // to the next call. `bytes` need stay valid only during the call. The sink
  // and reporter must not call back into this parser.
  void Feed(std::string_view bytes);

  // Ends the stream: parses a final line that lacks its "\n" (if any), then
  // readies the parser for a new stream whose lines are numbered from 1 again
  // (counters keep accumulating).
  void Finish();

  // Readings stamped later than `latest` are refused from now on
  // (kTimeInFuture): a reading far ahead of the clock would otherwise make
  // every later reading of its series look late. Inputs of `serve` set it to
  // the wall clock plus the allowed lead before each Feed. Default: no limit.
  void set_latest_time(EventTime latest) { latest_time_ = latest; }

  // Lines ended so far in the current stream.
  std::uint64_t line_number() const { return line_number_; }
  // Bytes of an unterminated line held since the last Feed (0 while skipping
  // an over-long line).
  std::size_t pending_bytes() const { return pending_.size(); }
  const ReadingParserCounters& counters() const { return counters_; }
  const ReadingParserOptions& options() const { return options_; }

 private:
  void AppendPending(const char* begin, const char* end);
  void EndLine(std::string_view line);  // the line without its "\n"
  void ParseLine(std::string_view line);
  void ParseCsv(std::string_view line);
  void ParseJson(std::string_view line);
  // Checks the series name and the value text, then delivers the reading or
  // reports the first problem.
  void Deliver(EventTime time, std::string_view series, std::string_view value_text);
  // Counts a refused line and tells the reporter: message, then the excerpt
  // (if any) quoted and made printable.
  void Report(ReadingError reason, std::string_view message,
              std::string_view excerpt = {});

  ReadingParserOptions options_;
  Sink sink_;
  Reporter reporter_;
  ReadingParserCounters counters_;
  std::uint64_t line_number_ = 0;
  EventTime latest_time_ = std::numeric_limits<EventTime>::max();  // later: refused
  std::string pending_;    // an unterminated line carried between Feed calls
  bool skipping_ = false;  // discarding the rest of an over-long line
  std::string unescaped_;  // a series name after CSV unquoting / JSON unescaping
  std::string time_text_;  // a JSON time string after unescaping (rare)
  std::string detail_;     // the text handed to the reporter
};

}  // namespace plumbline
