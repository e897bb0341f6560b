#include "detectors/time_format.h"

#include <gtest/gtest.h>

#include <cstdint>
#include <cstdio>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "detectors/random.h"

namespace plumbline {
namespace {

EventTime MustParse(std::string_view text) {
  StatusOr<EventTime> t = ParseTime(text);
  EXPECT_TRUE(t.ok()) << text << ": " << t.status().ToString();
  return t.ok() ? *t : std::numeric_limits<EventTime>::min();
}

TimeTextError ErrorOf(std::string_view text) {
  EventTime ignored = 0;
  return ParseTimeInto(text, &ignored);
}

// ---- Calendar ----

// Independent oracle (COMP, our own counting, no source needed): walk every day
// from 0001-01-01 to 9999-12-31 with a month-length table and the Gregorian
// leap rule, anchored so that 1970-01-01 is day 0 (the Unix epoch).
TEST(CalendarTest, DaysFromCivilMatchesDayByDayCountFrom0001To9999) {
  constexpr std::int64_t kDaysBefore1970 = 719162;  // days from 0001-01-01 to 1970-01-01
  std::int64_t day = -kDaysBefore1970;
  for (std::int64_t year = 1; year <= 9999; ++year) {
    const bool leap = (year % 4 == 0 && year % 100 != 0) || year % 400 == 0;
    const int lengths[12] = {31, leap ? 29 : 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    for (int month = 1; month <= 12; ++month) {
      for (int d = 1; d <= lengths[month - 1]; ++d, ++day) {
        if (DaysFromCivil(year, month, d) != day) {
          FAIL() << year << "-" << month << "-" << d << " gave "
                 << DaysFromCivil(year, month, d) << ", counted " << day;
        }
        const CivilDate back = CivilFromDays(day);
        if (back.year != year || back.month != month || back.day != d) {
          FAIL() << "CivilFromDays(" << day << ") gave " << back.year << "-" << back.month
                 << "-" << back.day;
        }
      }
    }
  }
  // The anchor (719162 = date(1970, 1, 1).toordinal() - 1 in Python, COMP) is
  // confirmed by the walk itself: DaysFromCivil(1970, 1, 1) must be 0.
  EXPECT_EQ(DaysFromCivil(1970, 1, 1), 0);
  EXPECT_EQ(day, DaysFromCivil(9999, 12, 31) + 1);
}

TEST(CalendarTest, DaysInMonthFollowsGregorianLeapRule) {
  // Common practice, no source: the Gregorian rule (divisible by 4, except
  // centuries not divisible by 400).
  EXPECT_EQ(DaysInMonth(2024, 2), 29);
  EXPECT_EQ(DaysInMonth(2026, 2), 28);
  EXPECT_EQ(DaysInMonth(1900, 2), 28);
  EXPECT_EQ(DaysInMonth(2000, 2), 29);
  EXPECT_EQ(DaysInMonth(2026, 4), 30);
  EXPECT_EQ(DaysInMonth(2026, 13), 0);
}

// ---- RFC 3339 ----

// Expected values computed with Python's datetime (COMP): microseconds of
// (datetime(...) - datetime(1970, 1, 1, tzinfo=timezone.utc)).
TEST(ParseTimeTest, Rfc3339MatchesValuesComputedWithPythonDatetime) {
  struct Case {
    const char* text;
    EventTime micros;
  };
  const Case cases[] = {
      {"1851-03-15T00:00:00Z", -3748982400000000},
      {"2026-03-01T12:00:00Z", 1772366400000000},
      {"0001-01-01T00:00:00Z", -62135596800000000},
      {"9999-12-31T23:59:59.999999Z", 253402300799999999},
      {"2000-02-29T12:34:56.789Z", 951827696789000},
      {"1900-03-01T00:00:00Z", -2203891200000000},
      {"1600-02-29T00:00:00Z", -11670998400000000},
      {"2026-03-01T12:00:00+02:00", 1772359200000000},
      {"2026-03-01T12:00:00-05:30", 1772386200000000},
      {"1969-12-31T23:59:59.5Z", -500000},
  };
  for (const Case& c : cases) EXPECT_EQ(MustParse(c.text), c.micros) << c.text;
}

// Pairs drawn with Python's random (seed 20260301) and formatted with
// datetime.isoformat() (COMP): the Python text must parse to the number, and our
// own formatting must carry the same date and time of day.
TEST(ParseTimeTest, AgreesWithPythonIsoformatOnRandomTimes) {
  struct Case {
    EventTime micros;
    const char* python;
  };
  const Case cases[] = {
      {19511124493000000, "2588-04-13T04:48:13+00:00"},
      {25088531023155000, "2765-01-09T12:23:43.155000+00:00"},
      {88980042818662641, "4789-08-31T14:33:38.662641+00:00"},
      {160745647644000000, "7063-10-30T00:47:24+00:00"},
      {765727138490000, "1994-04-07T13:58:58.490000+00:00"},
      {57297677071301825, "3785-09-09T13:24:31.301825+00:00"},
      {175258199577000000, "7523-09-18T09:12:57+00:00"},
      {-43074951279321000, "0605-01-04T07:45:20.679000+00:00"},
      {-19664363323553741, "1346-11-11T04:51:16.446259+00:00"},
      {47905441085000000, "3488-01-24T02:58:05+00:00"},
  };
  for (const Case& c : cases) {
    EXPECT_EQ(MustParse(c.python), c.micros) << c.python;
    EXPECT_EQ(FormatRfc3339(c.micros).substr(0, 19), std::string(c.python).substr(0, 19));
  }
}

// RFC 3339 section 5.6 notes (SEEN, quoted at
// https://stackoverflow.com/questions/63783868): 'T' and 'Z' may be lower case,
// and applications may choose a space between date and time for readability.
TEST(ParseTimeTest, AcceptsLowerCaseTAndZAndASpaceSeparator) {
  const EventTime expected = MustParse("2026-03-01T12:00:00Z");
  EXPECT_EQ(MustParse("2026-03-01t12:00:00z"), expected);
  EXPECT_EQ(MustParse("2026-03-01 12:00:00Z"), expected);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00+00:00"), expected);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00-00:00"), expected);  // "unknown offset" = UTC
}

TEST(ParseTimeTest, OffsetsCanCrossDayMonthAndYearBoundaries) {
  // Common practice, no source: local time minus offset is UTC.
  EXPECT_EQ(MustParse("2026-01-01T00:30:00+01:00"), MustParse("2025-12-31T23:30:00Z"));
  EXPECT_EQ(MustParse("2024-02-28T23:00:00-02:00"), MustParse("2024-02-29T01:00:00Z"));
  EXPECT_EQ(MustParse("2026-03-01T12:00:00+23:59"), MustParse("2026-02-28T12:01:00Z"));
}

TEST(ParseTimeTest, FractionsOfAnyLengthAreFlooredToTheMicrosecond) {
  const EventTime base = MustParse("2026-03-01T12:00:00Z");
  EXPECT_EQ(MustParse("2026-03-01T12:00:00.1Z"), base + 100000);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00.000001Z"), base + 1);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00.123456789Z"), base + 123456);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00.9999999Z"), base + 999999);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00.0000009Z"), base);
  EXPECT_EQ(MustParse("2026-03-01T12:00:00." + std::string(60, '5') + "+01:00"),
            base - kMicrosPerHour + 555555);
  // Pre-1970 fractions move later within their second, like any other.
  EXPECT_EQ(MustParse("1969-12-31T23:59:59.25Z"), -750000);
}

TEST(ParseTimeTest, RejectsDatesAndClockTimesThatDoNotExist) {
  EXPECT_EQ(ErrorOf("2026-02-30T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("2026-02-29T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("1900-02-29T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("2026-04-31T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("2026-13-01T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("2026-00-01T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("2026-01-00T00:00:00Z"), TimeTextError::kInvalidDate);
  EXPECT_EQ(ErrorOf("2026-03-01T24:00:00Z"), TimeTextError::kInvalidTimeOfDay);
  EXPECT_EQ(ErrorOf("2026-03-01T12:60:00Z"), TimeTextError::kInvalidTimeOfDay);
  EXPECT_EQ(ErrorOf("2026-03-01T12:00:61Z"), TimeTextError::kInvalidTimeOfDay);
  EXPECT_EQ(ErrorOf("2026-03-01T12:00:00+24:00"), TimeTextError::kInvalidOffset);
  EXPECT_EQ(ErrorOf("2026-03-01T12:00:00+05:60"), TimeTextError::kInvalidOffset);
  // The Status form says which.
  const StatusOr<EventTime> bad = ParseTime("2026-02-30T00:00:00Z");
  ASSERT_FALSE(bad.ok());
  EXPECT_EQ(bad.status().code(), Status::Code::kInvalidArgument);
  EXPECT_NE(bad.status().message().find("no such date"), std::string::npos);
}

TEST(ParseTimeTest, RejectsTextOutsideTheGrammar) {
  for (const char* text :
       {"", "2026-03-01", "2026-03-01T12:00:00", "2026-03-01T12:00Z",
        "2026-3-01T12:00:00Z", "2026-03-01T12:00:00.Z", "2026-03-01T12:00:00+0200",
        "2026-03-01T12:00:00+02", "2026-03-01T12:00:00ZZ", "2026-03-01T12:00:00Z ",
        " 2026-03-01T12:00:00Z", "2026-03-01X12:00:00Z", "2026-03-01T12:00:00UTC",
        "+2026-03-01T12:00:00Z", "20260301T120000Z", "2026-03-01T1a:00:00Z"}) {
    EXPECT_EQ(ErrorOf(text), TimeTextError::kMalformed) << text;
  }
}

// RFC 3339 section 5.7 (SEEN as quoted by its author at
// https://www.haskell.org/pipermail/libraries/2005-January/002993.html): second
// 60 only at 23:59:60Z at the end of a month, shifted by the zone offset; the
// 1990-12-31 pair is the RFC's own section 5.8 example (MEM). Our decision
// (header comment): map it to 23:59:59.999999 of that UTC day.
TEST(ParseTimeTest, LeapSecondMapsToLastMicrosecondOfItsUtcDay) {
  EXPECT_EQ(MustParse("1990-12-31T23:59:60Z"), MustParse("1990-12-31T15:59:60-08:00"));
  EXPECT_EQ(MustParse("2026-03-31T23:59:60Z"), MustParse("2026-03-31T23:59:59.999999Z"));
  EXPECT_EQ(ErrorOf("2026-03-30T23:59:60Z"), TimeTextError::kInvalidLeapSecond);
  EXPECT_EQ(ErrorOf("2017-01-01T23:59:60Z"), TimeTextError::kInvalidLeapSecond);
  const EventTime expected = MustParse("2016-12-31T23:59:59.999999Z");
  EXPECT_EQ(MustParse("2016-12-31T23:59:60Z"), expected);
  EXPECT_EQ(MustParse("2016-12-31T23:59:60.5Z"), expected);
  EXPECT_EQ(MustParse("2017-01-01T00:59:60+01:00"), expected);
  EXPECT_EQ(MustParse("2016-12-31T18:29:60-05:30"), expected);
  EXPECT_EQ(ErrorOf("2026-03-01T12:00:60Z"), TimeTextError::kInvalidLeapSecond);
  EXPECT_EQ(ErrorOf("2016-12-31T23:59:60+01:00"), TimeTextError::kInvalidLeapSecond);
  // Still ordered before the next day's first reading.
  EXPECT_LT(MustParse("2016-12-31T23:59:60Z"), MustParse("2017-01-01T00:00:00Z"));
}

TEST(ParseTimeTest, TimesOutsideYears0001To9999AreOutOfRange) {
  EXPECT_EQ(ErrorOf("0000-12-31T23:59:59Z"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ErrorOf("0001-01-01T00:30:00+01:00"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ErrorOf("9999-12-31T23:59:59-00:01"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ErrorOf("253402300800"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ErrorOf("-62135596800.000001"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ErrorOf("1e20"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ErrorOf("99999999999999999999999999999999"), TimeTextError::kOutOfRange);
  EXPECT_EQ(ParseTime("1e300").status().code(), Status::Code::kOutOfRange);
  // The edges themselves are inside.
  EXPECT_EQ(MustParse("253402300799.999999"), kMaxTextTime);
  EXPECT_EQ(MustParse("-62135596800"), kMinTextTime);
  EXPECT_EQ(MustParse("0001-01-01T01:00:00+01:00"), kMinTextTime);
}

// ---- Epoch seconds ----

TEST(ParseTimeTest, EpochSecondsAreExactAndFlooredToTheMicrosecond) {
  EXPECT_EQ(MustParse("1772366400"), MustParse("2026-03-01T12:00:00Z"));
  EXPECT_EQ(MustParse("1772366400.25"), MustParse("2026-03-01T12:00:00.25Z"));
  EXPECT_EQ(MustParse("-3748982400"), MustParse("1851-03-15T00:00:00Z"));
  EXPECT_EQ(MustParse("-1.5"), -1500000);
  EXPECT_EQ(MustParse("0"), 0);
  EXPECT_EQ(MustParse("-0"), 0);
  EXPECT_EQ(MustParse("0.0000009"), 0);
  EXPECT_EQ(MustParse("-0.0000005"), -1);  // floor, like the RFC 3339 fraction
  EXPECT_EQ(MustParse("1772366400.1234569"), 1772366400123456);
  EXPECT_EQ(MustParse("-1772366400.1234569"), -1772366400123457);
  // Binary floating point would not give these exactly.
  EXPECT_EQ(MustParse("0.1"), 100000);
  EXPECT_EQ(MustParse("1772366400.000001"), 1772366400000001);
  EXPECT_EQ(MustParse("0001772366400"), 1772366400000000);
}

// Whole seconds of up to 12 digits take a shorter path; it must agree with
// the general one (the same number with a zero fraction) on every length,
// leading zeros and the range's edge included.
TEST(ParseTimeTest, WholeEpochSecondsAgreeWithTheGeneralParse) {
  std::mt19937_64 random(17);
  std::vector<std::string> texts = {
      "0", "7", "000000000001", "253402300799", "253402300800", "999999999999"};
  for (int digits = 1; digits <= 13; ++digits) {
    for (int k = 0; k < 200; ++k) {
      std::string text;
      for (int d = 0; d < digits; ++d)
        text.push_back(static_cast<char>('0' + random() % 10));
      texts.push_back(text);
    }
  }
  for (const std::string& text : texts) {
    EventTime whole = 0, general = 0;
    const TimeTextError a = ParseTimeInto(text, &whole);
    const TimeTextError b = ParseTimeInto(text + ".0", &general);
    ASSERT_EQ(a, b) << text;
    if (a == TimeTextError::kOk) {
      ASSERT_EQ(whole, general) << text;
    }
  }
  EXPECT_EQ(ErrorOf("253402300800"), TimeTextError::kOutOfRange);
  EXPECT_EQ(MustParse("253402300799"), kMaxTextTime - 999999);
}

TEST(ParseTimeTest, EpochSecondsAcceptTheJsonExponentForm) {
  EXPECT_EQ(MustParse("1.7723664e9"), 1772366400000000);
  EXPECT_EQ(MustParse("1.7723664E+9"), 1772366400000000);
  EXPECT_EQ(MustParse("1772366400250e-3"), 1772366400250000);
  EXPECT_EQ(MustParse("25e-7"), 2);
  EXPECT_EQ(MustParse("-25e-7"), -3);
  EXPECT_EQ(MustParse("0e999999999"), 0);
  EXPECT_EQ(MustParse("1e-999999999"), 0);
}

TEST(ParseTimeTest, EpochSecondsRejectOtherNumberSpellings) {
  for (const char* text : {"-", "1.", ".5", "1e", "1e+", "+1", "0x10", "1,5", " 1", "1 ",
                           "1_000", "nan", "inf", "--1", "1e5.5", "12:00"}) {
    EXPECT_EQ(ErrorOf(text), TimeTextError::kMalformed) << text;
  }
}

// ---- Formatting ----

TEST(FormatRfc3339Test, WritesUtcWithTrimmedFraction) {
  const EventTime t = MustParse("2026-03-01T12:00:00Z");
  EXPECT_EQ(FormatRfc3339(t), "2026-03-01T12:00:00Z");
  EXPECT_EQ(FormatRfc3339(t + 250000), "2026-03-01T12:00:00.250Z");
  EXPECT_EQ(FormatRfc3339(t + 250001), "2026-03-01T12:00:00.250001Z");
  EXPECT_EQ(FormatRfc3339(t + 1), "2026-03-01T12:00:00.000001Z");
  EXPECT_EQ(FormatRfc3339(-1), "1969-12-31T23:59:59.999999Z");
  EXPECT_EQ(FormatRfc3339(-3748982400000000), "1851-03-15T00:00:00Z");
  EXPECT_EQ(FormatRfc3339(kMinTextTime), "0001-01-01T00:00:00Z");
  EXPECT_EQ(FormatRfc3339(kMaxTextTime), "9999-12-31T23:59:59.999999Z");
  std::string appended = "detected_at=";
  AppendRfc3339(t, &appended);
  EXPECT_EQ(appended, "detected_at=2026-03-01T12:00:00Z");
}

TEST(FormatRfc3339Test, YearsOutsideTheTextRangeUseExpandedForm) {
  EXPECT_EQ(FormatRfc3339(kMaxTextTime + 1), "+10000-01-01T00:00:00Z");
  EXPECT_EQ(FormatRfc3339(kMinTextTime - 1), "0000-12-31T23:59:59.999999Z");
  EXPECT_EQ(FormatRfc3339(kMinTextTime - 367 * kMicrosPerDay), "-0001-12-31T00:00:00Z");
  EXPECT_EQ(FormatRfc3339(std::numeric_limits<EventTime>::min()).front(), '-');
  EXPECT_EQ(FormatRfc3339(std::numeric_limits<EventTime>::max()).front(), '+');
}

TEST(FormatRfc3339Test, RoundTripsRandomTimesAcrossTheWholeRange) {
  // Common practice, no source: Parse(Format(t)) == t, and formatted text sorts
  // like the times when the fraction width is the same.
  Random random(3339);
  const auto span = static_cast<std::uint64_t>(kMaxTextTime - kMinTextTime) + 1;
  for (int i = 0; i < 200000; ++i) {
    EventTime t = kMinTextTime + static_cast<EventTime>(random.NextU64() % span);
    if (i % 3 == 0) t -= (t - kMinTextTime) % kMicrosPerSecond;  // whole seconds
    if (i % 3 == 1) t -= (t - kMinTextTime) % 1000;              // whole milliseconds
    const std::string text = FormatRfc3339(t);
    EventTime back = 0;
    ASSERT_EQ(ParseTimeInto(text, &back), TimeTextError::kOk) << text;
    ASSERT_EQ(back, t) << text;
    // The epoch-seconds spelling of the same time parses to it too.
    const std::int64_t seconds =
        t >= 0 ? t / kMicrosPerSecond : -((-t) / kMicrosPerSecond);
    const std::int64_t micros = t >= 0 ? t % kMicrosPerSecond : (-t) % kMicrosPerSecond;
    char epoch[64];
    std::snprintf(epoch, sizeof epoch, "%s%lld.%06lld", t < 0 ? "-" : "",
                  static_cast<long long>(seconds < 0 ? -seconds : seconds),
                  static_cast<long long>(micros));
    ASSERT_EQ(ParseTimeInto(epoch, &back), TimeTextError::kOk) << epoch;
    ASSERT_EQ(back, t) << epoch;
  }
}

TEST(TimeTextErrorTest, RoundTripsThroughText) {
  for (TimeTextError e :
       {TimeTextError::kOk, TimeTextError::kMalformed, TimeTextError::kInvalidDate,
        TimeTextError::kInvalidTimeOfDay, TimeTextError::kInvalidLeapSecond,
        TimeTextError::kInvalidOffset, TimeTextError::kOutOfRange}) {
    EXPECT_EQ(TimeTextErrorFromString(ToString(e)), e);
    EXPECT_FALSE(Describe(e).empty());
  }
  EXPECT_FALSE(TimeTextErrorFromString("late").has_value());
}

// ---- Durations ----

TEST(ParseDurationTest, ReadsConfigDurations) {
  // Unit sizes: common practice, no source (1 d = 86400 s; 1 w = 7 d).
  struct Case {
    const char* text;
    EventTime micros;
  };
  const Case cases[] = {
      {"15m", 15 * kMicrosPerMinute},
      {"1d", kMicrosPerDay},
      {"7d", 7 * kMicrosPerDay},
      {"365.25d", 31557600 * kMicrosPerSecond},
      {"6h", 6 * kMicrosPerHour},
      {"90s", 90 * kMicrosPerSecond},
      {"250ms", 250000},
      {"2w", 14 * kMicrosPerDay},
      {"1.5s", 1500000},
      {"0.5ms", 500},
      {"0.001ms", 1},
      {"0.0005ms", 1},  // half a microsecond rounds up
      {"0.00049ms", 0},
      {"1.000000000000000000001h", kMicrosPerHour},
      {"0.1h", 6 * kMicrosPerMinute},
      {"106751991d", 106751991 * kMicrosPerDay},
  };
  for (const Case& c : cases) {
    const StatusOr<EventTime> d = ParseDuration(c.text);
    if (c.micros == 0) {
      EXPECT_FALSE(d.ok()) << c.text;  // rounds to zero: refused
      continue;
    }
    ASSERT_TRUE(d.ok()) << c.text << ": " << d.status().ToString();
    EXPECT_EQ(*d, c.micros) << c.text;
  }
}

TEST(ParseDurationTest, RefusesBadSyntaxNonPositiveAndOverflow) {
  for (const char* text : {"", "15", "m", "-5m", "+5m", "5 m", " 5m", "5m ", "5min", "5M",
                           "1.m", ".5h", "0s", "0.0000001s", "1e3s", "5us", "1h30m"}) {
    const StatusOr<EventTime> d = ParseDuration(text);
    EXPECT_FALSE(d.ok()) << text;
    EXPECT_EQ(d.status().code(), Status::Code::kInvalidArgument) << text;
  }
  for (const char* text : {"106751992d", "99999999999999999999w", "15250285w",
                           "9223372036854775808ms", "9223372036854.775808s"}) {
    const StatusOr<EventTime> d = ParseDuration(text);
    EXPECT_FALSE(d.ok()) << text;
    EXPECT_EQ(d.status().code(), Status::Code::kOutOfRange) << text;
  }
  EXPECT_EQ(*ParseDuration("9223372036854.775807s"),
            std::numeric_limits<EventTime>::max());
}

TEST(FormatDurationTest, UsesTheLargestExactUnit) {
  EXPECT_EQ(FormatDuration(15 * kMicrosPerMinute), "15m");
  EXPECT_EQ(FormatDuration(7 * kMicrosPerDay), "1w");
  EXPECT_EQ(FormatDuration(8 * kMicrosPerDay), "8d");
  EXPECT_EQ(FormatDuration(*ParseDuration("365.25d")), "8766h");
  EXPECT_EQ(FormatDuration(90 * kMicrosPerSecond), "90s");
  EXPECT_EQ(FormatDuration(1500000), "1500ms");
  EXPECT_EQ(FormatDuration(250), "0.00025s");
  EXPECT_EQ(FormatDuration(1), "0.000001s");
  EXPECT_EQ(FormatDuration(kMicrosPerSecond + 1), "1.000001s");
  EXPECT_EQ(FormatDuration(0), "0s");
  EXPECT_EQ(FormatDuration(-15 * kMicrosPerMinute), "-15m");
  EXPECT_EQ(FormatDuration(std::numeric_limits<EventTime>::min()).front(), '-');
}

TEST(FormatDurationTest, RoundTripsRandomDurations) {
  // Common practice, no source: ParseDuration(FormatDuration(d)) == d.
  Random random(86400);
  const EventTime grains[] = {
      1, 1000, kMicrosPerSecond, kMicrosPerMinute, kMicrosPerHour, kMicrosPerDay};
  for (int i = 0; i < 100000; ++i) {
    const EventTime grain = grains[i % 6];
    const EventTime d =
        grain * (1 + static_cast<EventTime>(random.NextU64() % 1'000'000));
    const std::string text = FormatDuration(d);
    const StatusOr<EventTime> back = ParseDuration(text);
    ASSERT_TRUE(back.ok()) << text;
    ASSERT_EQ(*back, d) << text;
  }
  const EventTime max = std::numeric_limits<EventTime>::max();
  EXPECT_EQ(*ParseDuration(FormatDuration(max)), max);
}

}  // namespace
}  // namespace plumbline
