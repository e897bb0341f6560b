#include "detectors/time_format.h"

#include <array>
#include <cstring>
#include <limits>

namespace plumbline {
namespace {

__extension__ using Uint128 = unsigned __int128;

constexpr bool IsDigit(char c) { return c >= '0' && c <= '9'; }

// Reads n ASCII digits at text[pos..pos+n) into *value; false unless all are digits.
bool ReadDigits(std::string_view text, std::size_t pos, int n, int* value) {
  int v = 0;
  for (int i = 0; i < n; ++i) {
    const char c = text[pos + static_cast<std::size_t>(i)];
    if (!IsDigit(c)) return false;
    v = v * 10 + (c - '0');
  }
  *value = v;
  return true;
}

// YYYY-MM-DDTHH:MM:SS[.f+](Z|+HH:MM|-HH:MM); see the header for the rules.
TimeTextError ParseRfc3339Into(std::string_view text, EventTime* out) {
  // The shortest form is 20 characters: 2026-03-01T12:00:00Z.
  if (text.size() < 20) return TimeTextError::kMalformed;
  int year, month, day, hour, minute, second;
  if (!ReadDigits(text, 0, 4, &year) || text[4] != '-' ||
      !ReadDigits(text, 5, 2, &month) || text[7] != '-' ||
      !ReadDigits(text, 8, 2, &day)) {
    return TimeTextError::kMalformed;
  }
  const char sep = text[10];
  if (sep != 'T' && sep != 't' && sep != ' ') return TimeTextError::kMalformed;
  if (!ReadDigits(text, 11, 2, &hour) || text[13] != ':' ||
      !ReadDigits(text, 14, 2, &minute) || text[16] != ':' ||
      !ReadDigits(text, 17, 2, &second)) {
    return TimeTextError::kMalformed;
  }
  std::size_t pos = 19;
  EventTime fraction = 0;  // microseconds; later digits are dropped (floor)
  if (text[pos] == '.') {
    ++pos;
    const std::size_t first = pos;
    EventTime scale = 100000;
    while (pos < text.size() && IsDigit(text[pos])) {
      fraction += (text[pos] - '0') * scale;
      scale /= 10;
      ++pos;
    }
    if (pos == first) return TimeTextError::kMalformed;
  }
  if (pos >= text.size()) return TimeTextError::kMalformed;
  int offset_minutes = 0;
  const char zone = text[pos];
  if (zone == 'Z' || zone == 'z') {
    ++pos;
  } else if (zone == '+' || zone == '-') {
    int offset_hour, offset_minute;
    if (text.size() - pos != 6 || !ReadDigits(text, pos + 1, 2, &offset_hour) ||
        text[pos + 3] != ':' || !ReadDigits(text, pos + 4, 2, &offset_minute)) {
      return TimeTextError::kMalformed;
    }
    if (offset_hour > 23 || offset_minute > 59) return TimeTextError::kInvalidOffset;
    offset_minutes = (zone == '-' ? -1 : 1) * (offset_hour * 60 + offset_minute);
    pos += 6;
  } else {
    return TimeTextError::kMalformed;
  }
  if (pos != text.size()) return TimeTextError::kMalformed;

  if (month < 1 || month > 12 || day < 1 || day > DaysInMonth(year, month)) {
    return TimeTextError::kInvalidDate;
  }
  if (hour > 23 || minute > 59 || second > 60) return TimeTextError::kInvalidTimeOfDay;
  const bool leap_second = second == 60;
  if (leap_second) {
    // RFC 3339 section 5.7: a leap second is 23:59:60 in UTC.
    const int utc_minute_of_day =
        ((hour * 60 + minute - offset_minutes) % 1440 + 1440) % 1440;
    if (utc_minute_of_day != 23 * 60 + 59) return TimeTextError::kInvalidLeapSecond;
    second = 59;
    fraction = kMicrosPerSecond - 1;
  }
  const EventTime local = DaysFromCivil(year, month, day) * kMicrosPerDay +
                          hour * kMicrosPerHour + minute * kMicrosPerMinute +
                          second * kMicrosPerSecond + fraction;
  const EventTime utc = local - offset_minutes * kMicrosPerMinute;
  if (utc < kMinTextTime || utc > kMaxTextTime) return TimeTextError::kOutOfRange;
  if (leap_second) {
    // ... and only on the last day of a month (section 5.7), in UTC.
    const CivilDate utc_date =
        CivilFromDays(utc / kMicrosPerDay - (utc % kMicrosPerDay < 0));
    if (utc_date.day != DaysInMonth(utc_date.year, utc_date.month)) {
      return TimeTextError::kInvalidLeapSecond;
    }
  }
  *out = utc;
  return TimeTextError::kOk;
}

// [-]digits[.digits][(e|E)[+|-]digits], converted exactly and floored to the
// microsecond.
TimeTextError ParseEpochSecondsInto(std::string_view text, EventTime* out) {
  // Whole seconds of up to 12 digits, the usual case: exact, and far from
  // overflow (under 1e18 microseconds), so only the range check remains.
  if (!text.empty() && text.size() <= 12) {
    std::int64_t seconds = 0;
    std::size_t i = 0;
    for (; i < text.size() && IsDigit(text[i]); ++i)
      seconds = seconds * 10 + (text[i] - '0');
    if (i == text.size()) {
      const EventTime value = seconds * kMicrosPerSecond;
      if (value > kMaxTextTime) return TimeTextError::kOutOfRange;
      *out = value;
      return TimeTextError::kOk;
    }
  }
  std::size_t pos = 0;
  const std::size_t n = text.size();
  const bool negative = pos < n && text[pos] == '-';
  if (negative) ++pos;
  const std::size_t int_begin = pos;
  while (pos < n && IsDigit(text[pos])) ++pos;
  const std::size_t int_end = pos;
  if (int_end == int_begin) return TimeTextError::kMalformed;
  std::size_t frac_begin = pos, frac_end = pos;
  if (pos < n && text[pos] == '.') {
    frac_begin = ++pos;
    while (pos < n && IsDigit(text[pos])) ++pos;
    frac_end = pos;
    if (frac_end == frac_begin) return TimeTextError::kMalformed;
  }
  std::int64_t exponent = 0;
  if (pos < n && (text[pos] == 'e' || text[pos] == 'E')) {
    ++pos;
    bool exponent_negative = false;
    if (pos < n && (text[pos] == '+' || text[pos] == '-'))
      exponent_negative = text[pos++] == '-';
    const std::size_t exp_begin = pos;
    while (pos < n && IsDigit(text[pos])) {
      // Saturate: any exponent this large is out of range (or zero) anyway.
      if (exponent < 1'000'000) exponent = exponent * 10 + (text[pos] - '0');
      ++pos;
    }
    if (pos == exp_begin) return TimeTextError::kMalformed;
    if (exponent_negative) exponent = -exponent;
  }
  if (pos != n) return TimeTextError::kMalformed;

  // The digit string D = integer digits then fraction digits; the microsecond
  // point falls after `point` digits of D. Integer microseconds are the digits
  // before it (zero-padded), and any nonzero digit after it makes the value
  // inexact (floored below).
  const auto int_digits = static_cast<std::int64_t>(int_end - int_begin);
  const auto frac_digits = static_cast<std::int64_t>(frac_end - frac_begin);
  const std::int64_t total = int_digits + frac_digits;
  const std::int64_t point = int_digits + exponent + 6;
  auto digit_at = [&](std::int64_t i) -> int {
    return i < int_digits
               ? text[int_begin + static_cast<std::size_t>(i)] - '0'
               : text[frac_begin + static_cast<std::size_t>(i - int_digits)] - '0';
  };
  // Anything above this many microseconds is out of range; it also keeps the
  // accumulation far from uint64 overflow.
  constexpr std::uint64_t kLimit = static_cast<std::uint64_t>(kMaxTextTime) + 1;
  std::uint64_t micros = 0;
  bool inexact = false;
  bool too_large = false;
  for (std::int64_t i = 0; i < total; ++i) {
    const int d = digit_at(i);
    if (i < point) {
      if (!too_large) {
        micros = micros * 10 + static_cast<std::uint64_t>(d);
        if (micros > kLimit) too_large = true;
      }
    } else if (d != 0) {
      inexact = true;
      break;
    }
  }
  // Zero padding when the point lies beyond the last digit.
  for (std::int64_t i = total; i < point && !too_large && micros != 0; ++i) {
    micros *= 10;
    if (micros > kLimit) too_large = true;
  }
  if (too_large) return TimeTextError::kOutOfRange;
  auto value = static_cast<EventTime>(micros);
  if (negative) value = -value - (inexact ? 1 : 0);
  if (value < kMinTextTime || value > kMaxTextTime) return TimeTextError::kOutOfRange;
  *out = value;
  return TimeTextError::kOk;
}

void AppendDigits(std::uint64_t value, int width, std::string* out) {
  char buffer[24];
  int n = 0;
  do {
    buffer[n++] = static_cast<char>('0' + value % 10);
    value /= 10;
  } while (value != 0);
  for (int i = n; i < width; ++i) out->push_back('0');
  while (n > 0) out->push_back(buffer[--n]);
}

}  // namespace

std::string_view ToString(TimeTextError error) {
  switch (error) {
    case TimeTextError::kOk:
      return "ok";
    case TimeTextError::kMalformed:
      return "malformed";
    case TimeTextError::kInvalidDate:
      return "invalid_date";
    case TimeTextError::kInvalidTimeOfDay:
      return "invalid_time_of_day";
    case TimeTextError::kInvalidLeapSecond:
      return "invalid_leap_second";
    case TimeTextError::kInvalidOffset:
      return "invalid_offset";
    case TimeTextError::kOutOfRange:
      return "out_of_range";
  }
  return "unknown";
}

std::optional<TimeTextError> TimeTextErrorFromString(std::string_view text) {
  for (TimeTextError e :
       {TimeTextError::kOk, TimeTextError::kMalformed, TimeTextError::kInvalidDate,
        TimeTextError::kInvalidTimeOfDay, TimeTextError::kInvalidLeapSecond,
        TimeTextError::kInvalidOffset, TimeTextError::kOutOfRange}) {
    if (ToString(e) == text) return e;
  }
  return std::nullopt;
}

std::string_view Describe(TimeTextError error) {
  switch (error) {
    case TimeTextError::kOk:
      return "ok";
    case TimeTextError::kMalformed:
      return "not an RFC 3339 time or epoch seconds";
    case TimeTextError::kInvalidDate:
      return "no such date";
    case TimeTextError::kInvalidTimeOfDay:
      return "no such time of day";
    case TimeTextError::kInvalidLeapSecond:
      return "leap second not at 23:59:60 UTC";
    case TimeTextError::kInvalidOffset:
      return "UTC offset beyond 23:59";
    case TimeTextError::kOutOfRange:
      return "outside years 0001-9999";
  }
  return "unknown";
}

TimeTextError ParseTimeInto(std::string_view text, EventTime* out) {
  // RFC 3339 starts with four digits and a dash; epoch seconds never have a
  // dash at index 4 (a minus sign can only lead, an exponent sign follows 'e').
  if (text.size() > 4 && text[4] == '-' && text[0] != '-')
    return ParseRfc3339Into(text, out);
  return ParseEpochSecondsInto(text, out);
}

StatusOr<EventTime> ParseTime(std::string_view text) {
  EventTime time = 0;
  const TimeTextError error = ParseTimeInto(text, &time);
  if (error == TimeTextError::kOk) return time;
  std::string message = std::string(Describe(error)) + ": \"" + std::string(text) + "\"";
  if (error == TimeTextError::kOutOfRange) return Status::OutOfRange(std::move(message));
  return Status::InvalidArgument(std::move(message));
}

void AppendRfc3339(EventTime time, std::string* out) {
  // Floor division, safe for every int64 including the minimum.
  std::int64_t days = time / kMicrosPerDay;
  std::int64_t micros_of_day = time % kMicrosPerDay;
  if (micros_of_day < 0) {
    micros_of_day += kMicrosPerDay;
    --days;
  }
  const CivilDate date = CivilFromDays(days);
  if (date.year < 0) {
    out->push_back('-');
    AppendDigits(static_cast<std::uint64_t>(-date.year), 4, out);
  } else if (date.year > 9999) {
    out->push_back('+');
    AppendDigits(static_cast<std::uint64_t>(date.year), 4, out);
  }
  // The fixed-width rest, written into a local buffer: MM-DDTHH:MM:SS[.fff[fff]]Z
  // after a 4-digit year.
  char buffer[32];
  char* p = buffer;
  auto put = [&p](std::uint64_t value, int width) {
    for (int i = width - 1; i >= 0; --i) {
      p[i] = static_cast<char>('0' + value % 10);
      value /= 10;
    }
    p += width;
  };
  if (date.year >= 0 && date.year <= 9999) put(static_cast<std::uint64_t>(date.year), 4);
  const auto seconds_of_day =
      static_cast<std::uint64_t>(micros_of_day / kMicrosPerSecond);
  const auto fraction = static_cast<std::uint64_t>(micros_of_day % kMicrosPerSecond);
  *p++ = '-';
  put(static_cast<std::uint64_t>(date.month), 2);
  *p++ = '-';
  put(static_cast<std::uint64_t>(date.day), 2);
  *p++ = 'T';
  put(seconds_of_day / 3600, 2);
  *p++ = ':';
  put(seconds_of_day / 60 % 60, 2);
  *p++ = ':';
  put(seconds_of_day % 60, 2);
  if (fraction != 0) {
    *p++ = '.';
    if (fraction % 1000 == 0) {
      put(fraction / 1000, 3);
    } else {
      put(fraction, 6);
    }
  }
  *p++ = 'Z';
  out->append(buffer, static_cast<std::size_t>(p - buffer));
}

std::string FormatRfc3339(EventTime time) {
  std::string out;
  out.reserve(32);
  AppendRfc3339(time, &out);
  return out;
}

namespace {

struct DurationUnit {
  std::string_view suffix;
  EventTime micros;
};
// Largest first: FormatDuration picks the first unit that divides exactly.
constexpr std::array<DurationUnit, 6> kDurationUnits = {{
    {"w", 7 * kMicrosPerDay},
    {"d", kMicrosPerDay},
    {"h", kMicrosPerHour},
    {"m", kMicrosPerMinute},
    {"s", kMicrosPerSecond},
    {"ms", 1000},
}};

}  // namespace

StatusOr<EventTime> ParseDuration(std::string_view text) {
  auto bad = [&](std::string_view why) {
    return Status::InvalidArgument("duration \"" + std::string(text) +
                                   "\": " + std::string(why));
  };
  std::size_t pos = 0;
  const std::size_t n = text.size();
  const std::size_t int_begin = pos;
  while (pos < n && IsDigit(text[pos])) ++pos;
  const std::size_t int_end = pos;
  std::size_t frac_begin = pos, frac_end = pos;
  if (pos < n && text[pos] == '.') {
    frac_begin = ++pos;
    while (pos < n && IsDigit(text[pos])) ++pos;
    frac_end = pos;
    if (frac_end == frac_begin) return bad("expected digits after '.'");
  }
  if (int_end == int_begin) {
    return bad("expected a positive number followed by a unit (ms, s, m, h, d, w)");
  }
  const std::string_view suffix = text.substr(pos);
  EventTime unit = 0;
  for (const DurationUnit& u : kDurationUnits) {
    if (u.suffix == suffix) unit = u.micros;
  }
  if (unit == 0) {
    return bad(suffix.empty() ? "missing unit (ms, s, m, h, d, w)"
                              : "unknown unit (expected ms, s, m, h, d or w)");
  }
  const auto out_of_range = [&] {
    return Status::OutOfRange("duration \"" + std::string(text) + "\" is too long");
  };
  // Integer part times unit, with overflow checks.
  std::uint64_t whole = 0;
  for (std::size_t i = int_begin; i < int_end; ++i) {
    if (__builtin_mul_overflow(whole, 10u, &whole) ||
        __builtin_add_overflow(whole, static_cast<unsigned>(text[i] - '0'), &whole)) {
      return out_of_range();
    }
  }
  std::uint64_t micros = 0;
  if (__builtin_mul_overflow(whole, static_cast<std::uint64_t>(unit), &micros)) {
    return out_of_range();
  }
  // Fraction times unit, exact on its first 18 digits, rounded half up.
  Uint128 numerator = 0, denominator = 1;
  for (std::size_t i = frac_begin; i < frac_end && i < frac_begin + 18; ++i) {
    numerator = numerator * 10 + static_cast<unsigned>(text[i] - '0');
    denominator *= 10;
  }
  const Uint128 scaled = numerator * static_cast<Uint128>(unit);
  const auto fraction_micros =
      static_cast<std::uint64_t>((2 * scaled + denominator) / (2 * denominator));
  if (__builtin_add_overflow(micros, fraction_micros, &micros) ||
      micros > static_cast<std::uint64_t>(std::numeric_limits<EventTime>::max())) {
    return out_of_range();
  }
  if (micros == 0) return bad("must be at least one microsecond");
  return static_cast<EventTime>(micros);
}

std::string FormatDuration(EventTime duration) {
  if (duration == 0) return "0s";
  std::string out;
  // Magnitude as unsigned so that the int64 minimum works too.
  std::uint64_t magnitude = static_cast<std::uint64_t>(duration);
  if (duration < 0) {
    out.push_back('-');
    magnitude = ~magnitude + 1;
  }
  for (const DurationUnit& u : kDurationUnits) {
    const auto unit = static_cast<std::uint64_t>(u.micros);
    if (magnitude % unit == 0) {
      AppendDigits(magnitude / unit, 1, &out);
      out.append(u.suffix);
      return out;
    }
  }
  AppendDigits(magnitude / 1'000'000, 1, &out);
  std::uint64_t fraction = magnitude % 1'000'000;  // nonzero: not whole milliseconds
  int width = 6;
  while (fraction % 10 == 0) {
    fraction /= 10;
    --width;
  }
  out.push_back('.');
  AppendDigits(fraction, width, &out);
  out.push_back('s');
  return out;
}

}  // namespace plumbline
