// Time text <-> EventTime: RFC 3339 timestamps, Unix epoch seconds, and the
// durations used in configs (15m, 1d, 365.25d). Pure functions of their
// arguments: no clock, no time zone database, no locale; thread-safe.
//
// Calendar
// --------
// Dates are proleptic Gregorian and converted with Howard Hinnant's
// days_from_civil / civil_from_days algorithms ("chrono-Compatible Low-Level
// Date Algorithms", http://howardhinnant.github.io/date_algorithms.html), which
// are exact for every year an int64 can count, so no timegm() and no 1901/1970
// limits. Epoch time ignores leap seconds (POSIX time): every day has 86400 s.
//
// Accepted time text (ParseTime)
// ------------------------------
//   RFC 3339 date-time:  YYYY-MM-DDTHH:MM:SS[.fraction](Z|+HH:MM|-HH:MM)
//     - 'T' may also be 't' or a single space, 'Z' may be 'z' (RFC 3339 section
//       5.6, notes); the offset is subtracted to give UTC; "-00:00" means UTC.
//     - The fraction may have any number of digits. Digits beyond the sixth are
//       dropped, i.e. the time is floored to its microsecond (never moved later).
//     - Dates are checked (no Feb 30, Feb 29 only in leap years), HH <= 23,
//       MM <= 59, offsets within +-23:59.
//     - Leap seconds: SS = 60 is accepted only where RFC 3339 (section 5.7)
//       allows it, at 23:59:60 UTC on the last day of a month (after applying
//       the offset: 1990-12-31T15:59:60-08:00 is fine). Since EventTime has no
//       leap seconds, it maps to 23:59:59.999999 of that UTC day (its fraction
//       is ignored), which keeps readings taken during a leap second in order
//       and within their day. The date is not checked against the IERS table.
//   Unix epoch seconds:  [-]digits[.digits][(e|E)[+|-]digits]
//     - e.g. 1772366400, 1772366400.25, -3748982400, 1.7723664e9 (the JSON
//       number grammar, plus leading zeros). Converted exactly (decimal digit
//       arithmetic, no binary floating point) and floored to the microsecond,
//       like the RFC 3339 fraction: -0.0000005 becomes -1 microsecond.
//   Both forms are limited to [0001-01-01T00:00:00Z, 9999-12-31T23:59:59.999999Z],
//   the years RFC 3339 can write; anything outside is "out of range", so every
//   accepted time formats back to RFC 3339 text.
//
// Written time text (FormatRfc3339)
// ---------------------------------
//   UTC with 'Z'; no fraction for whole seconds, 3 digits for whole
//   milliseconds, else 6 digits: 2026-03-01T12:00:00Z, 2026-03-01T12:00:00.250Z,
//   2026-03-01T12:00:00.250001Z. ParseTime(FormatRfc3339(t)) == t for every t in
//   the range above. Outside it (only computed times can be), the year is
//   written as in ISO 8601's expanded form: "-0001", "+10000" (0000 is 1 BC).
//
// Durations (ParseDuration / FormatDuration)
// ------------------------------------------
//   <number><unit>, number = digits[.digits], unit one of ms, s, m, h, d, w
//   (1 d = 86400 s, 1 w = 7 d; "m" is minutes). Strictly positive, no sign, no
//   spaces. The product is computed exactly and rounded half up to the nearest
//   microsecond; a result of 0 or above the int64 range is refused.
//   FormatDuration writes the largest unit that divides the duration exactly
//   (7d -> "1w", 365.25d -> "8766h", 1500ms -> "1500ms"), else seconds with a
//   trimmed 6-digit fraction ("0.000250s"); ParseDuration reads it back exactly.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

#include "detectors/event_time.h"
#include "detectors/status.h"

namespace plumbline {

// ---- Calendar (Hinnant's algorithms; see above) ----

struct CivilDate {
  std::int64_t year = 1970;  // proleptic Gregorian, astronomical (0 = 1 BC)
  int month = 1;             // 1..12
  int day = 1;               // 1..31
};

// Days since 1970-01-01 of a proleptic Gregorian date. Precondition: month in
// 1..12, day in 1..DaysInMonth(year, month), |year| < 2^50.
constexpr std::int64_t DaysFromCivil(std::int64_t year, int month, int day) {
  year -= month <= 2 ? 1 : 0;
  const std::int64_t era = (year >= 0 ? year : year - 399) / 400;
  const auto yoe = static_cast<std::uint64_t>(year - era * 400);  // [0, 399]
  const auto mp =
      static_cast<std::uint64_t>(month > 2 ? month - 3 : month + 9);  // [0, 11]
  const std::uint64_t doy = (153 * mp + 2) / 5 + static_cast<std::uint64_t>(day) - 1;
  const std::uint64_t doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;  // [0, 146096]
  return era * 146097 + static_cast<std::int64_t>(doe) - 719468;
}

// Inverse of DaysFromCivil, for every int64 day count that is at most 2^60 in size.
constexpr CivilDate CivilFromDays(std::int64_t days) {
  days += 719468;
  const std::int64_t era = (days >= 0 ? days : days - 146096) / 146097;
  const auto doe = static_cast<std::uint64_t>(days - era * 146097);  // [0, 146096]
  const std::uint64_t yoe =
      (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;          // [0, 399]
  const std::uint64_t doy = doe - (365 * yoe + yoe / 4 - yoe / 100);  // [0, 365]
  const std::uint64_t mp = (5 * doy + 2) / 153;                       // [0, 11]
  const auto day = static_cast<int>(doy - (153 * mp + 2) / 5 + 1);    // [1, 31]
  const auto month = static_cast<int>(mp < 10 ? mp + 3 : mp - 9);     // [1, 12]
  const std::int64_t year =
      static_cast<std::int64_t>(yoe) + era * 400 + (month <= 2 ? 1 : 0);
  return CivilDate{year, month, day};
}

constexpr bool IsLeapYear(std::int64_t year) {
  return year % 4 == 0 && (year % 100 != 0 || year % 400 == 0);
}

// 28..31; 0 for a month outside 1..12.
constexpr int DaysInMonth(std::int64_t year, int month) {
  constexpr int kDays[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  if (month < 1 || month > 12) return 0;
  return month == 2 && IsLeapYear(year) ? 29 : kDays[month - 1];
}

// The range of times ParseTime accepts: 0001-01-01T00:00:00Z ..
// 9999-12-31T23:59:59.999999Z.
inline constexpr EventTime kMinTextTime = DaysFromCivil(1, 1, 1) * kMicrosPerDay;
inline constexpr EventTime kMaxTextTime =
    DaysFromCivil(9999, 12, 31) * kMicrosPerDay + kMicrosPerDay - 1;

// ---- Time points ----

// Why a time text was refused. kOk means it was accepted.
enum class TimeTextError {
  kOk,
  kMalformed,          // neither grammar above
  kInvalidDate,        // e.g. 2026-02-30, month 13, day 00
  kInvalidTimeOfDay,   // hour 24, minute 60, second 61
  kInvalidLeapSecond,  // second 60 anywhere but 23:59:60 UTC on a month's last day
  kInvalidOffset,      // offset hour > 23 or minute > 59
  kOutOfRange,         // well-formed but outside [kMinTextTime, kMaxTextTime]
};

// "ok", "malformed", "invalid_date", "invalid_time_of_day", "invalid_leap_second",
// "invalid_offset", "out_of_range"; and back (nullopt for unknown text).
std::string_view ToString(TimeTextError error);
std::optional<TimeTextError> TimeTextErrorFromString(std::string_view text);
// A short human sentence for error messages, e.g. "no such date".
std::string_view Describe(TimeTextError error);

// The non-allocating core of ParseTime, for hot paths: on kOk stores the time
// in *out; on any error leaves *out unchanged.
TimeTextError ParseTimeInto(std::string_view text, EventTime* out);

// RFC 3339 or epoch seconds (see the header comment). On failure: OutOfRange
// for kOutOfRange, InvalidArgument otherwise, with the reason and the text.
StatusOr<EventTime> ParseTime(std::string_view text);

// UTC RFC 3339 text (see the header comment for the fraction rule).
std::string FormatRfc3339(EventTime time);
// Appends FormatRfc3339(time) to *out without a temporary string.
void AppendRfc3339(EventTime time, std::string* out);

// ---- Durations ----

// A strictly positive duration in microseconds from text such as "15m", "1d",
// "365.25d", "250ms", "2w". InvalidArgument for bad syntax or a non-positive
// result, OutOfRange when it does not fit in an int64.
StatusOr<EventTime> ParseDuration(std::string_view text);

// Text that ParseDuration reads back to the same value (see the header comment).
// Zero is "0s"; a negative duration is "-" followed by the text of its magnitude
// (ParseDuration refuses both, since configs only hold positive durations).
std::string FormatDuration(EventTime duration);

}  // namespace plumbline
