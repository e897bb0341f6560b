#include "daemon/reading_parser.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <string>
#include <string_view>
#include <tuple>
#include <vector>

#include "detectors/random.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

// The readings and reports of one parse, as plain values.
struct OwnedReading {
  EventTime time;
  std::string series;
  double value;
  std::uint64_t line;  // the parser's line number when the reading arrived
  bool operator==(const OwnedReading& o) const {
    return std::tie(time, series, value, line) ==
           std::tie(o.time, o.series, o.value, o.line);
  }
};
struct Problem {
  std::uint64_t line;
  ReadingError reason;
  std::string detail;
  bool operator==(const Problem& o) const {
    return std::tie(line, reason, detail) == std::tie(o.line, o.reason, o.detail);
  }
};

struct Outcome {
  std::vector<OwnedReading> readings;
  std::vector<Problem> problems;
  ReadingParserCounters counters;
};

// Holds a parser whose sink and reporter append to `outcome`.
class Harness {
 public:
  explicit Harness(ReadingParserOptions options = {})
      : parser_(
            options,
            [this](const Reading& r) {
              outcome_.readings.push_back(
                  {r.time, std::string(r.series), r.value, parser_.line_number()});
            },
            [this](std::uint64_t line, ReadingError reason, std::string_view detail) {
              outcome_.problems.push_back({line, reason, std::string(detail)});
            }) {}

  ReadingParser& parser() { return parser_; }
  Outcome Take() {
    outcome_.counters = parser_.counters();
    return std::move(outcome_);
  }

 private:
  Outcome outcome_;
  ReadingParser parser_;
};

// Feeds `input` in one piece (or in pieces of `chunk` bytes), then Finish().
Outcome Parse(std::string_view input, std::size_t chunk = 0,
              ReadingParserOptions options = {}) {
  Harness harness(options);
  if (chunk == 0) {
    harness.parser().Feed(input);
  } else {
    for (std::size_t i = 0; i < input.size(); i += chunk) {
      harness.parser().Feed(input.substr(i, chunk));
    }
  }
  harness.parser().Finish();
  return harness.Take();
}

EventTime T(std::string_view text) { return *ParseTime(text); }

// The reason a single line is refused with, or nullopt if it gives a reading.
std::optional<ReadingError> ReasonFor(std::string_view line) {
  const Outcome out = Parse(std::string(line) + "\n");
  if (out.problems.empty()) return std::nullopt;
  EXPECT_EQ(out.problems.size(), 1u) << line;
  return out.problems.front().reason;
}

constexpr std::string_view kTime = "2026-03-01T12:00:00Z";

std::string CsvLine(std::string_view series, std::string_view value = "1") {
  return std::string(kTime) + "," + std::string(series) + "," + std::string(value);
}
std::string JsonLine(std::string_view series_json, std::string_view value_json = "1") {
  return "{\"time\": \"" + std::string(kTime) +
         "\", \"series\": " + std::string(series_json) +
         ", \"value\": " + std::string(value_json) + "}";
}

// ---- The two forms ----

TEST(ReadingParserTest, ParsesACsvLine) {
  const Outcome out = Parse("2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n");
  ASSERT_EQ(out.readings.size(), 1u);
  EXPECT_EQ(out.readings[0], (OwnedReading{T("2026-03-01T12:00:00Z"),
                                           "coldstore/freezer-1/temp_c", -18.5, 1}));
  EXPECT_TRUE(out.problems.empty());
}

TEST(ReadingParserTest, ParsesJsonWithKeysInAnyOrderAndWhitespace) {
  const Outcome out = Parse(
      "{\"time\":\"2026-03-01T12:00:00Z\",\"series\":\"a\",\"value\":1}\n"
      "  { \"value\" : 2.5e1 ,\t\"series\" : \"b\" , \"time\" : "
      "\"2026-03-01T13:00:00+01:00\" }  \n"
      "{\"series\":\"c\",\"time\":1772366400.5,\"value\":-3}\n"
      "{\"series\":\"d\",\"value\":\"4.25\",\"time\":\"1772366400\"}\n");
  ASSERT_TRUE(out.problems.empty()) << out.problems[0].detail;
  ASSERT_EQ(out.readings.size(), 4u);
  EXPECT_EQ(out.readings[0], (OwnedReading{T(kTime), "a", 1.0, 1}));
  EXPECT_EQ(out.readings[1], (OwnedReading{T(kTime), "b", 25.0, 2}));
  EXPECT_EQ(out.readings[2], (OwnedReading{T(kTime) + 500000, "c", -3.0, 3}));
  EXPECT_EQ(out.readings[3], (OwnedReading{T(kTime), "d", 4.25, 4}));
}

TEST(ReadingParserTest, MixesCsvAndJsonInOneStream) {
  const Outcome out = Parse(
      "2026-03-01T12:00:00Z,a,1\n"
      "{\"time\": \"2026-03-01T12:01:00Z\", \"series\": \"a\", \"value\": 2}\n"
      "1772366520,a,3\n");
  ASSERT_EQ(out.readings.size(), 3u);
  EXPECT_EQ(out.readings[1].time, T("2026-03-01T12:01:00Z"));
  EXPECT_EQ(out.readings[2].time, T("2026-03-01T12:02:00Z"));
  EXPECT_EQ(out.readings[2].value, 3.0);
}

TEST(ReadingParserTest, IgnoresUnknownJsonKeysOfAnyShape) {
  const Outcome out = Parse(
      "{\"unit\": \"C\", \"time\": \"2026-03-01T12:00:00Z\", \"tags\": {\"site\": [1, "
      "{\"x\": null}, true, \"q\\\"uote\"], \"e\": {}}, \"series\": \"a\", \"n\": "
      "-1.5e3, "
      "\"value\": 7, \"list\": []}\n"
      "{\"\\u0074ime\": \"2026-03-01T12:00:00Z\", \"series\": \"b\", \"val\\u0075e\": "
      "8}\n");
  ASSERT_TRUE(out.problems.empty()) << out.problems[0].detail;
  ASSERT_EQ(out.readings.size(), 2u);
  EXPECT_EQ(out.readings[0].value, 7.0);
  EXPECT_EQ(out.readings[1].value, 8.0);  // escaped keys name the same members
}

TEST(ReadingParserTest, SkipsHeaderLinesWhereverTheyAppear) {
  const Outcome out = Parse(
      "time,series,value\n"
      "2026-03-01T12:00:00Z,a,1\n"
      " time , series , value \r\n"
      "\"time\",\"series\",\"value\"\n"
      "2026-03-01T12:00:00Z,a,2\n");
  EXPECT_EQ(out.readings.size(), 2u);
  EXPECT_TRUE(out.problems.empty());
  EXPECT_EQ(out.counters.header_lines, 3u);
  // Other names are not a header: the first field is then a bad time.
  EXPECT_EQ(ReasonFor("timestamp,series,value"), ReadingError::kBadTime);
  EXPECT_EQ(ReasonFor("Time,Series,Value"), ReadingError::kBadTime);
}

TEST(ReadingParserTest, IgnoresBlankLinesAndCountsThem) {
  const Outcome out = Parse("\n\r\n   \n\t \r\n2026-03-01T12:00:00Z,a,1\n\n");
  ASSERT_EQ(out.readings.size(), 1u);
  EXPECT_EQ(out.readings[0].line, 5u);  // blank lines still count as lines
  EXPECT_TRUE(out.problems.empty());
  EXPECT_EQ(out.counters.blank_lines, 5u);
  EXPECT_EQ(out.counters.lines, 6u);
}

TEST(ReadingParserTest, AcceptsCrLfAndTreatsALoneCrAsContent) {
  const Outcome out =
      Parse("2026-03-01T12:00:00Z,a,1\r\n{\"time\":1,\"series\":\"b\",\"value\":2}\r\n");
  ASSERT_EQ(out.readings.size(), 2u);
  EXPECT_EQ(out.readings[0].value, 1.0);
  EXPECT_EQ(ReasonFor("2026-03-01T12:00:00Z,a,1\r2026-03-01T12:00:00Z,a,2"),
            ReadingError::kWrongFieldCount);
  EXPECT_EQ(ReasonFor("2026-03-01T12:00:00Z,a,1\r\r"), ReadingError::kBadValue);
}

// RFC 4180 section 2 (MEM): fields may be enclosed in double quotes; a quote
// inside is written as two quotes.
TEST(ReadingParserTest, QuotedCsvFieldsHoldCommasAndDoubledQuotes) {
  const Outcome out = Parse(
      "2026-03-01T12:00:00Z,\"plant 1, line 2/temp\",1\n"
      "2026-03-01T12:00:00Z, \"say \"\"hi\"\"\" ,2\n"
      "\"2026-03-01T12:00:00Z\",\"a\",\"3\"\n"
      "2026-03-01T12:00:00Z,\"  padded  \",4\n"
      "2026-03-01T12:00:00Z,un\"quoted,5\n");
  ASSERT_TRUE(out.problems.empty()) << out.problems[0].detail;
  ASSERT_EQ(out.readings.size(), 5u);
  EXPECT_EQ(out.readings[0].series, "plant 1, line 2/temp");
  EXPECT_EQ(out.readings[1].series, "say \"hi\"");
  EXPECT_EQ(out.readings[2].series, "a");
  EXPECT_EQ(out.readings[2].value, 3.0);
  EXPECT_EQ(out.readings[3].series, "  padded  ");
  EXPECT_EQ(out.readings[4].series, "un\"quoted");
}

TEST(ReadingParserTest, TrimsSpacesAroundUnquotedCsvFields) {
  const Outcome out =
      Parse("  2026-03-01T12:00:00Z ,\tcoldstore/dock/door_openings\t, 12.5 \n");
  ASSERT_EQ(out.readings.size(), 1u);
  EXPECT_EQ(out.readings[0].series, "coldstore/dock/door_openings");
  EXPECT_EQ(out.readings[0].value, 12.5);
}

TEST(ReadingParserTest, ReadsTimesInEveryAcceptedForm) {
  const Outcome out = Parse(
      "1851-03-15T00:00:00Z,hist,1\n"
      "-3748982400,hist,2\n"
      "1851-03-15T01:00:00+01:00,hist,3\n"
      "{\"time\": -3748982400.0, \"series\": \"hist\", \"value\": 4}\n"
      "{\"time\": \"-3.7489824e9\", \"series\": \"hist\", \"value\": 5}\n");
  ASSERT_EQ(out.readings.size(), 5u);
  // -3748982400 s: computed with Python's datetime (see time_format_test.cc).
  for (const OwnedReading& r : out.readings)
    EXPECT_EQ(r.time, -3748982400 * kMicrosPerSecond);
}

TEST(ReadingParserTest, ReadsValuesLikeStrtodButLocaleFree) {
  struct Case {
    const char* text;
    double value;
  };
  const Case cases[] = {{"-18.5", -18.5},
                        {"+3", 3.0},
                        {"1e3", 1000.0},
                        {".5", 0.5},
                        {"5.", 5.0},
                        {"-0", -0.0},
                        {"1E-2", 0.01},
                        {"1e-400", 0.0},
                        {"1.7976931348623157e308", 1.7976931348623157e308},
                        {"007", 7.0}};
  for (const Case& c : cases) {
    const Outcome out = Parse(CsvLine("a", c.text) + "\n");
    ASSERT_EQ(out.readings.size(), 1u) << c.text;
    EXPECT_EQ(out.readings[0].value, c.value) << c.text;
  }
  const Outcome tiny = Parse(CsvLine("a", "-1e-400") + "\n");
  ASSERT_EQ(tiny.readings.size(), 1u);
  EXPECT_TRUE(std::signbit(tiny.readings[0].value));  // underflow keeps its sign
}

TEST(ReadingParserTest, AcceptsWellFormedUtf8SeriesNames) {
  const Outcome out =
      Parse(CsvLine("caf\xC3\xA9/temp") + "\n" +          // U+00E9
            CsvLine("\xE6\xB8\xA9\xE5\xBA\xA6") + "\n" +  // CJK
            CsvLine("\xF0\x9F\x98\x80") + "\n" +          // U+1F600
            CsvLine("\xF4\x8F\xBF\xBF") + "\n" +          // U+10FFFF, the last code point
            CsvLine("nb\xC2\xA0space") + "\n" +           // U+00A0 is not C1
            JsonLine("\"\\ud83d\\ude00\"") + "\n" +       // surrogate pair = U+1F600
            JsonLine("\"caf\\u00e9\\/\\\\\\\"\"") + "\n");  // escapes
  ASSERT_TRUE(out.problems.empty()) << out.problems[0].detail;
  ASSERT_EQ(out.readings.size(), 7u);
  EXPECT_EQ(out.readings[5].series, "\xF0\x9F\x98\x80");
  EXPECT_EQ(out.readings[6].series, "caf\xC3\xA9/\\\"");
}

TEST(ReadingParserTest, SeriesNamesMayHoldExactly256Bytes) {
  const std::string name256(256, 'x');
  EXPECT_EQ(ReasonFor(CsvLine(name256)), std::nullopt);
  EXPECT_EQ(ReasonFor(CsvLine(name256 + "x")), ReadingError::kSeriesNameTooLong);
  // The limit counts decoded bytes: 128 escaped e-acutes are 256 bytes.
  std::string escaped;
  for (int i = 0; i < 128; ++i) escaped += "\\u00e9";
  EXPECT_EQ(ReasonFor(JsonLine("\"" + escaped + "\"")), std::nullopt);
  EXPECT_EQ(ReasonFor(JsonLine("\"" + escaped + "\\u00e9\"")),
            ReadingError::kSeriesNameTooLong);
  // And CSV's doubled quotes count once.
  EXPECT_EQ(ReasonFor(CsvLine("\"" + std::string(254, 'q') + "\"\"\"\"\"")),
            std::nullopt);
}

// ---- Every reason ----

TEST(ReadingParserTest, ReportsEveryReasonForTheFirstProblemOfALine) {
  struct Case {
    std::string line;
    ReadingError reason;
  };
  const std::vector<Case> cases = {
      // malformed
      {CsvLine("\"unterminated"), ReadingError::kMalformed},
      {CsvLine("\"a\"b"), ReadingError::kMalformed},
      {"{\"time\": \"2026-03-01T12:00:00Z\"", ReadingError::kMalformed},
      {"{\"time\" \"2026-03-01T12:00:00Z\", \"series\": \"a\", \"value\": 1}",
       ReadingError::kMalformed},
      {JsonLine("\"a\"") + " x", ReadingError::kMalformed},
      {JsonLine("\"a\\q\""), ReadingError::kMalformed},
      {JsonLine("\"a\\u12\""), ReadingError::kMalformed},
      {JsonLine("\"a\\ud800\\uZZZZ\""), ReadingError::kMalformed},
      {"{time: 1, series: \"a\", value: 1}", ReadingError::kMalformed},
      {"{\"time\": 1, \"series\": \"a\", \"value\": 1,}", ReadingError::kMalformed},
      {"{\"x\": [1, 2}, \"time\": 1, \"series\": \"a\", \"value\": 1}",
       ReadingError::kMalformed},
      {"{\"x\": " + std::string(40, '[') + std::string(40, ']') +
           ", \"time\": 1, \"series\": \"a\", \"value\": 1}",
       ReadingError::kMalformed},  // nesting beyond 32
      // wrong_field_count
      {"2026-03-01T12:00:00Z,a", ReadingError::kWrongFieldCount},
      {CsvLine("a") + ",2", ReadingError::kWrongFieldCount},
      {CsvLine("a") + ",", ReadingError::kWrongFieldCount},
      {"hello", ReadingError::kWrongFieldCount},
      // missing_field, duplicate_field
      {"{\"time\": 1, \"series\": \"a\"}", ReadingError::kMissingField},
      {"{}", ReadingError::kMissingField},
      {"{\"time\": 1, \"series\": \"a\", \"series\": \"b\", \"value\": 1}",
       ReadingError::kDuplicateField},
      // bad_time
      {"2026-02-30T00:00:00Z,a,1", ReadingError::kBadTime},
      {"2026-03-01T24:00:00Z,a,1", ReadingError::kBadTime},
      {"2026-03-01T12:60:00Z,a,1", ReadingError::kBadTime},
      {"yesterday,a,1", ReadingError::kBadTime},
      {",a,1", ReadingError::kBadTime},
      {"{\"time\": true, \"series\": \"a\", \"value\": 1}", ReadingError::kBadTime},
      {"{\"time\": {\"s\": 1}, \"series\": \"a\", \"value\": 1}", ReadingError::kBadTime},
      // time_out_of_range
      {"0000-06-01T00:00:00Z,a,1", ReadingError::kTimeOutOfRange},
      {"1e20,a,1", ReadingError::kTimeOutOfRange},
      {"{\"time\": 253402300800, \"series\": \"a\", \"value\": 1}",
       ReadingError::kTimeOutOfRange},
      // bad_value
      {CsvLine("a", ""), ReadingError::kBadValue},
      {CsvLine("a", "abc"), ReadingError::kBadValue},
      {CsvLine("a", "12.5x"), ReadingError::kBadValue},
      {CsvLine("a", "1 2"), ReadingError::kBadValue},
      {CsvLine("a", "0x10"), ReadingError::kBadValue},
      {CsvLine("a", "+-1"), ReadingError::kBadValue},
      {CsvLine("a", "1,5"), ReadingError::kWrongFieldCount},  // the comma splits fields
      {JsonLine("\"a\"", "null"), ReadingError::kBadValue},
      {JsonLine("\"a\"", "true"), ReadingError::kBadValue},
      {JsonLine("\"a\"", "[1]"), ReadingError::kBadValue},
      {JsonLine("\"a\"", "\"\""), ReadingError::kBadValue},
      // non_finite_value
      {CsvLine("a", "nan"), ReadingError::kNonFiniteValue},
      {CsvLine("a", "inf"), ReadingError::kNonFiniteValue},
      {CsvLine("a", "-Infinity"), ReadingError::kNonFiniteValue},
      {CsvLine("a", "1e400"), ReadingError::kNonFiniteValue},
      {CsvLine("a", "-1e400"), ReadingError::kNonFiniteValue},
      {JsonLine("\"a\"", "NaN"), ReadingError::kNonFiniteValue},
      {JsonLine("\"a\"", "-Infinity"), ReadingError::kNonFiniteValue},
      {JsonLine("\"a\"", "\"NaN\""), ReadingError::kNonFiniteValue},
      // bad_series_name
      {CsvLine(""), ReadingError::kBadSeriesName},
      {CsvLine("\"\""), ReadingError::kBadSeriesName},
      {CsvLine("a\x01"
               "b"),
       ReadingError::kBadSeriesName},
      {CsvLine("a\tb"), ReadingError::kBadSeriesName},
      {CsvLine("a\x7F"), ReadingError::kBadSeriesName},
      {CsvLine("a\xC2\x85"), ReadingError::kBadSeriesName},          // C1 NEL
      {CsvLine("a\xC2\x9F"), ReadingError::kBadSeriesName},          // last C1
      {CsvLine("a\xFF"), ReadingError::kBadSeriesName},              // never valid
      {CsvLine("a\x80"), ReadingError::kBadSeriesName},              // stray continuation
      {CsvLine("a\xC0\xAF"), ReadingError::kBadSeriesName},          // overlong '/'
      {CsvLine("a\xE0\x80\xAF"), ReadingError::kBadSeriesName},      // overlong '/'
      {CsvLine("a\xF0\x80\x80\xAF"), ReadingError::kBadSeriesName},  // overlong '/'
      {CsvLine("a\xED\xA0\x80"), ReadingError::kBadSeriesName},      // surrogate U+D800
      {CsvLine("a\xF4\x90\x80\x80"), ReadingError::kBadSeriesName},  // U+110000
      {CsvLine("a\xE2\x82"), ReadingError::kBadSeriesName},          // truncated
      {CsvLine("\xE2\x82"), ReadingError::kBadSeriesName},  // truncated at the end
      {JsonLine("\"a\\u0007\""), ReadingError::kBadSeriesName},
      {JsonLine("\"a\\n\""), ReadingError::kBadSeriesName},
      {JsonLine("\"a\\u0085\""), ReadingError::kBadSeriesName},
      {JsonLine("\"a\\ud800\""), ReadingError::kBadSeriesName},
      {JsonLine("\"a\\udc00\\ud800\""), ReadingError::kBadSeriesName},
      {JsonLine("\"a\\ud800\\u0041\""), ReadingError::kBadSeriesName},
      {JsonLine("42"), ReadingError::kBadSeriesName},
      {JsonLine("null"), ReadingError::kBadSeriesName},
      {JsonLine("\"\""), ReadingError::kBadSeriesName},
      // series_name_too_long
      {CsvLine(std::string(257, 's')), ReadingError::kSeriesNameTooLong},
      // line_too_long
      {CsvLine(std::string(5000, 's')), ReadingError::kLineTooLong},
  };
  std::vector<bool> covered(kReadingErrorCount, false);
  for (const Case& c : cases) {
    const std::optional<ReadingError> reason = ReasonFor(c.line);
    ASSERT_TRUE(reason.has_value()) << "accepted: " << c.line;
    EXPECT_EQ(*reason, c.reason) << "line: " << c.line << " gave " << ToString(*reason);
    covered[static_cast<std::size_t>(c.reason)] = true;
  }
  // Needs a latest time: TimeAheadOfTheLatestTimeIsRefusedAndTheNextLineTaken.
  covered[static_cast<std::size_t>(ReadingError::kTimeInFuture)] = true;
  // A NUL byte cannot go through CsvLine's C-string argument; built by hand.
  const std::string with_nul = std::string(kTime) + ",a" + std::string(1, '\0') + "b,1";
  EXPECT_EQ(ReasonFor(with_nul), ReadingError::kBadSeriesName);
  for (std::size_t i = 0; i < kReadingErrorCount; ++i) {
    EXPECT_TRUE(covered[i]) << "no case for " << ToString(static_cast<ReadingError>(i));
  }
}

TEST(ReadingParserTest, TimeAheadOfTheLatestTimeIsRefusedAndTheNextLineTaken) {
  std::vector<ReadingError> reasons;
  std::vector<EventTime> times;
  ReadingParser parser(
      ReadingParserOptions{}, [&](const Reading& r) { times.push_back(r.time); },
      [&](std::uint64_t, ReadingError reason, std::string_view) { reasons.push_back(reason); });
  const EventTime latest = 1772366400LL * kMicrosPerSecond;  // 2026-03-01T12:00:00Z
  parser.set_latest_time(latest);
  parser.Feed(CsvLine("a") + "\n");  // exactly at the latest time: taken
  parser.Feed("2026-03-01T12:00:00.000001Z,a,1\n");
  parser.Feed("{\"time\": 4102444800, \"series\": \"a\", \"value\": 1}\n");  // 2100
  parser.Feed("2026-03-01T11:00:00Z,a,2\n");
  EXPECT_EQ(times, (std::vector<EventTime>{latest, latest - kMicrosPerHour}));
  EXPECT_EQ(reasons,
            (std::vector<ReadingError>{ReadingError::kTimeInFuture, ReadingError::kTimeInFuture}));
  EXPECT_EQ(parser.counters().Rejected(ReadingError::kTimeInFuture), 2u);
  EXPECT_EQ(ToString(ReadingError::kTimeInFuture), "time_in_future");
}

TEST(ReadingParserTest, ABadLineNeverAffectsTheNextLine) {
  const std::string bad_lines[] = {
      CsvLine("\"unterminated"),
      "{\"time\": \"2026-03-01T12:00:00Z\", \"series\": \"a",
      "{\"x\": [[[[",
      "2026-02-30T00:00:00Z,a,1",
      CsvLine("a\xE2\x82"),  // a truncated UTF-8 sequence at the end
      CsvLine("a", "1e400"),
      std::string(5000, '{'),
      "\"",
      "{",
      "\xEF\xBB\xBF" + CsvLine("a"),  // a byte order mark is only skipped on line 1
  };
  for (const std::string& bad : bad_lines) {
    for (const char* end : {"\n", "\r\n"}) {
      const std::string good = CsvLine("coldstore/freezer-1/temp_c", "-18.5");
      const Outcome out = Parse(CsvLine("first") + end + bad + end + good + end);
      ASSERT_EQ(out.problems.size(), 1u) << bad;
      EXPECT_EQ(out.problems[0].line, 2u);
      ASSERT_EQ(out.readings.size(), 2u) << bad;
      EXPECT_EQ(out.readings[1],
                (OwnedReading{T(kTime), "coldstore/freezer-1/temp_c", -18.5, 3}))
          << bad;
    }
  }
}

TEST(ReadingParserTest, DetailsArePrintableShortAndQuoteTheOffendingText) {
  const Outcome out =
      Parse("2026-02-30T00:00:00Z,a,1\n" + CsvLine(std::string(300, 'x') + "\x01") +
            "\n" + CsvLine("a", "\x1B[31mred\xFF\xC2\x85\xE6\xB8\xA9") + "\n");
  ASSERT_EQ(out.problems.size(), 3u);
  EXPECT_EQ(out.problems[0].detail, "no such date: \"2026-02-30T00:00:00Z\"");
  for (const Problem& p : out.problems) {
    EXPECT_LE(p.detail.size(), 120u) << p.detail;
    for (char c : p.detail)
      EXPECT_FALSE(static_cast<unsigned char>(c) < 0x20 || c == 0x7F);
  }
  // Valid multibyte text survives; control bytes and invalid UTF-8 become '?'.
  EXPECT_EQ(out.problems[2].detail, "not a number: \"?[31mred???\xE6\xB8\xA9\"");
}

// ---- Line length ----

TEST(ReadingParserTest, LineOfExactlyTheLimitIsAcceptedAndOneMoreIsNot) {
  ReadingParserOptions options;
  options.max_line_bytes = 100;
  const std::string prefix = std::string(kTime) + ",";
  const std::string fits = prefix + std::string(100 - prefix.size() - 2, 's') + ",1";
  ASSERT_EQ(fits.size(), 100u);
  const std::string too_long = prefix + std::string(100 - prefix.size() - 1, 's') + ",1";
  for (std::size_t chunk : {0u, 1u, 7u, 100u, 101u}) {
    const Outcome out =
        Parse(fits + "\n" + fits + "\r\n" + too_long + "\n" + too_long + "\r\n" + fits,
              chunk, options);
    EXPECT_EQ(out.readings.size(), 3u) << chunk;
    ASSERT_EQ(out.problems.size(), 2u) << chunk;
    EXPECT_EQ(out.problems[0].line, 3u);
    EXPECT_EQ(out.problems[1].line, 4u);
    EXPECT_EQ(out.problems[0].reason, ReadingError::kLineTooLong);
    EXPECT_EQ(out.readings[2].line, 5u);
  }
}

TEST(ReadingParserTest, OverLongLineIsSkippedToItsEndAndReportedOnce) {
  const std::string huge = std::string(20000, 'z');
  for (std::size_t chunk : {0u, 1u, 13u, 4096u, 4097u, 65536u}) {
    Harness harness;
    const std::string input =
        CsvLine("a") + "\n" + huge + "," + huge + "\n" + CsvLine("b") + "\n" + huge;
    for (std::size_t i = 0; i < input.size(); i += chunk == 0 ? input.size() : chunk) {
      harness.parser().Feed(
          std::string_view(input).substr(i, chunk == 0 ? input.size() : chunk));
      // Memory held for a partial line stays bounded by the limit.
      EXPECT_LE(harness.parser().pending_bytes(), 4097u);
    }
    harness.parser().Finish();
    const Outcome out = harness.Take();
    ASSERT_EQ(out.readings.size(), 2u) << chunk;
    EXPECT_EQ(out.readings[1].series, "b");
    ASSERT_EQ(out.problems.size(), 2u) << chunk;
    EXPECT_EQ(out.problems[0].line, 2u);
    EXPECT_EQ(out.problems[1].line, 4u);  // the final unterminated line too
    EXPECT_EQ(out.problems[0].detail, "line longer than 4096 bytes");
    EXPECT_EQ(out.counters.lines, 4u);
    EXPECT_EQ(out.counters.Rejected(ReadingError::kLineTooLong), 2u);
  }
}

// ---- Incremental feeding ----

// A sample touching every path: both forms, CRLF, quotes, escapes, UTF-8,
// blank and header lines, bad lines of several kinds, a long line, and a final
// line without a newline.
std::string Sample() {
  return "\xEF\xBB\xBFtime,series,value\r\n"
         "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\r\n"
         "\n"
         "{\"time\": \"2026-03-01T12:00:30.25+01:00\", \"series\": \"caf\\u00e9 "
         "\\ud83d\\ude00\", "
         "\"value\": 1e3}\n"
         "2026-03-01T12:01:00Z,\"dock, door \"\"A\"\"\",3\n"
         "2026-02-30T12:01:00Z,x,1\n"
         "1772366460.5,\xE6\xB8\xA9\xE5\xBA\xA6,4\r\n"
         "   \t \r\n"
         "{\"series\": \"s\", \"value\": NaN, \"time\": 1}\n"
         "2026-03-01T12:02:00Z,a\xC3,5\n" +
         CsvLine(std::string(300, 'L')) + "\n" +
         "{\"value\": \"6\", \"extra\": {\"k\": [1, \"}\"]}, \"series\": \"b\", "
         "\"time\": 1772366520}\n"
         "2026-03-01T12:03:00Z,last,7";
}

TEST(ReadingParserTest, SplitFeedsAtEveryByteBoundaryGiveIdenticalResults) {
  const std::string sample = Sample();
  const Outcome whole = Parse(sample);
  ASSERT_EQ(whole.readings.size(), 6u);
  ASSERT_EQ(whole.problems.size(), 4u);
  EXPECT_EQ(whole.problems[0].reason, ReadingError::kBadTime);
  EXPECT_EQ(whole.problems[1].reason, ReadingError::kNonFiniteValue);
  EXPECT_EQ(whole.problems[2].reason, ReadingError::kBadSeriesName);
  EXPECT_EQ(whole.problems[3].reason, ReadingError::kSeriesNameTooLong);
  EXPECT_EQ(whole.counters.header_lines, 1u);
  EXPECT_EQ(whole.counters.blank_lines, 2u);
  EXPECT_EQ(whole.counters.lines, 13u);
  EXPECT_EQ(whole.readings.back().series, "last");  // the line without "\n"
  EXPECT_EQ(whole.readings[1].series, "caf\xC3\xA9 \xF0\x9F\x98\x80");
  EXPECT_EQ(whole.readings[1].time, T("2026-03-01T11:00:30.25Z"));
  EXPECT_EQ(whole.readings[2].series, "dock, door \"A\"");

  ReadingParserOptions options;
  options.max_line_bytes = 200;  // makes the 300-byte line too long
  const Outcome whole_short = Parse(sample, 0, options);
  ASSERT_EQ(whole_short.problems.size(), 4u);
  EXPECT_EQ(whole_short.problems[3].reason, ReadingError::kLineTooLong);

  // Two pieces, split at every byte.
  for (std::size_t i = 0; i <= sample.size(); ++i) {
    for (const auto* expected : {&whole, &whole_short}) {
      Harness harness(expected == &whole ? ReadingParserOptions{} : options);
      harness.parser().Feed(std::string_view(sample).substr(0, i));
      harness.parser().Feed(std::string_view(sample).substr(i));
      harness.parser().Finish();
      const Outcome split = harness.Take();
      ASSERT_EQ(split.readings, expected->readings) << "split at " << i;
      ASSERT_EQ(split.problems, expected->problems) << "split at " << i;
      ASSERT_EQ(split.counters.lines, expected->counters.lines);
    }
  }
  // Three pieces, at every pair of boundaries 3 bytes apart or more, and byte by byte.
  for (std::size_t i = 0; i <= sample.size(); i += 3) {
    for (std::size_t j = i; j <= sample.size(); j += 5) {
      Harness harness(options);
      harness.parser().Feed(std::string_view(sample).substr(0, i));
      harness.parser().Feed(std::string_view(sample).substr(i, j - i));
      harness.parser().Feed(std::string_view(sample).substr(j));
      harness.parser().Finish();
      const Outcome split = harness.Take();
      ASSERT_EQ(split.readings, whole_short.readings) << i << "," << j;
      ASSERT_EQ(split.problems, whole_short.problems) << i << "," << j;
    }
  }
  const Outcome bytewise = Parse(sample, 1, options);
  EXPECT_EQ(bytewise.readings, whole_short.readings);
  EXPECT_EQ(bytewise.problems, whole_short.problems);
}

// Common practice, no source: a seeded mutation check. Random byte edits of
// the sample (including newlines, quotes, braces, high bytes) fed in random
// chunks must give the same outcome as one whole feed, and every line must be
// accounted for exactly once.
TEST(ReadingParserTest, MutatedInputGivesTheSameOutcomeWhateverTheChunking) {
  Random random(4180);
  const std::string sample = Sample();
  const char kBytes[] = "\n\r\",{}[]:\\ut0-.e9Z\xC3\xA9\xED\xF4\x80\x01";
  ReadingParserOptions options;
  options.max_line_bytes = 128;
  for (int round = 0; round < 3000; ++round) {
    std::string input = sample;
    const int edits = 1 + static_cast<int>(random.NextU64() % 8);
    for (int e = 0; e < edits; ++e) {
      const std::size_t at = random.NextU64() % input.size();
      const char byte = kBytes[random.NextU64() % (sizeof kBytes - 1)];
      switch (random.NextU64() % 3) {
        case 0:
          input[at] = byte;
          break;
        case 1:
          input.insert(at, 1, byte);
          break;
        default:
          input.erase(at, 1);
          break;
      }
    }
    const Outcome whole = Parse(input, 0, options);
    const ReadingParserCounters& c = whole.counters;
    ASSERT_EQ(c.lines, c.readings + c.blank_lines + c.header_lines + c.rejected) << input;
    ASSERT_EQ(c.readings, whole.readings.size());
    ASSERT_EQ(c.rejected, whole.problems.size());
    for (const OwnedReading& r : whole.readings) {
      ASSERT_TRUE(IsValidSeriesName(r.series)) << r.series;
      ASSERT_TRUE(std::isfinite(r.value));
    }
    Harness harness(options);
    for (std::size_t i = 0; i < input.size();) {
      const std::size_t n = 1 + random.NextU64() % 64;
      harness.parser().Feed(std::string_view(input).substr(i, n));
      i += n;
    }
    harness.parser().Finish();
    const Outcome chunked = harness.Take();
    ASSERT_EQ(chunked.readings, whole.readings) << input;
    ASSERT_EQ(chunked.problems, whole.problems) << input;
  }
}

TEST(ReadingParserTest, FinishFlushesAFinalLineWithoutNewlineAndRestartsNumbering) {
  Harness harness;
  harness.parser().Feed("2026-03-01T12:00:00Z,a,1\n2026-03-01T12:00:00Z,a,");
  harness.parser().Feed("2");
  EXPECT_EQ(harness.parser().line_number(), 1u);
  harness.parser().Finish();
  EXPECT_EQ(harness.parser().line_number(), 0u);
  harness.parser().Feed("bad\r");
  harness.parser().Finish();  // "\r" without "\n" is dropped like a CRLF
  harness.parser().Finish();  // nothing pending: no effect
  const Outcome out = harness.Take();
  ASSERT_EQ(out.readings.size(), 2u);
  EXPECT_EQ(out.readings[1].value, 2.0);
  EXPECT_EQ(out.readings[1].line, 2u);
  ASSERT_EQ(out.problems.size(), 1u);
  EXPECT_EQ(out.problems[0].line, 1u);  // numbered within the second stream
  EXPECT_EQ(out.problems[0].reason, ReadingError::kWrongFieldCount);
  EXPECT_EQ(out.problems[0].detail, "expected 3 fields (time,series,value), found 1");
  EXPECT_EQ(out.counters.lines, 3u);
}

TEST(ReadingParserTest, ByteOrderMarkIsSkippedOnlyAtTheStartOfAStream) {
  Harness harness;
  harness.parser().Feed("\xEF\xBB");
  harness.parser().Feed(
      "\xBF"
      "2026-03-01T12:00:00Z,a,1\n");
  harness.parser().Feed(
      "\xEF\xBB\xBF"
      "2026-03-01T12:00:00Z,a,1\n");
  harness.parser().Finish();
  harness.parser().Feed("\xEF\xBB\xBF{\"time\": 1, \"series\": \"a\", \"value\": 1}");
  harness.parser().Finish();
  const Outcome out = harness.Take();
  EXPECT_EQ(out.readings.size(), 2u);
  ASSERT_EQ(out.problems.size(), 1u);
  EXPECT_EQ(out.problems[0].reason, ReadingError::kBadTime);
}

TEST(ReadingParserTest, SeriesPointsIntoTheFedBufferWhenTheLineIsWhole) {
  // The speed contract: no copy for a line wholly inside one chunk.
  const std::string input = CsvLine("coldstore/compressor-2/power_kw") + "\n" +
                            JsonLine("\"coldstore/main/energy_kwh\"") + "\n";
  std::vector<bool> inside;
  ReadingParser parser({}, [&](const Reading& r) {
    inside.push_back(r.series.data() >= input.data() &&
                     r.series.data() + r.series.size() <= input.data() + input.size());
  });
  parser.Feed(input);
  parser.Finish();
  EXPECT_EQ(inside, (std::vector<bool>{true, true}));
}

// ---- Counters, options, names ----

TEST(ReadingParserTest, CountsBytesLinesReadingsAndRejectionsByReason) {
  const std::string input = "time,series,value\n\n" + CsvLine("a") + "\n" +
                            CsvLine("a", "x") + "\n" + CsvLine("a", "nan") + "\n" +
                            CsvLine("a", "y");
  ReadingParser parser({}, nullptr,
                       nullptr);  // no sink, no reporter: counting still works
  parser.Feed(input);
  parser.Finish();
  const ReadingParserCounters& c = parser.counters();
  EXPECT_EQ(c.bytes, input.size());
  EXPECT_EQ(c.lines, 6u);
  EXPECT_EQ(c.readings, 1u);
  EXPECT_EQ(c.header_lines, 1u);
  EXPECT_EQ(c.blank_lines, 1u);
  EXPECT_EQ(c.rejected, 3u);
  EXPECT_EQ(c.Rejected(ReadingError::kBadValue), 2u);
  EXPECT_EQ(c.Rejected(ReadingError::kNonFiniteValue), 1u);
  EXPECT_EQ(c.lines, c.readings + c.header_lines + c.blank_lines + c.rejected);
}

TEST(ReadingParserOptionsTest, MaxLineBytesMustLieIn64To16MiB) {
  std::string why;
  EXPECT_TRUE(ReadingParserOptions{}.IsValid(&why));
  ReadingParserOptions options;
  options.max_line_bytes = 63;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("max_line_bytes"), std::string::npos);
  options.max_line_bytes = 64;
  EXPECT_TRUE(options.IsValid(nullptr));
  options.max_line_bytes = (std::size_t{16} << 20) + 1;
  EXPECT_FALSE(options.IsValid(nullptr));
}

TEST(ReadingErrorTest, RoundTripsThroughText) {
  for (std::size_t i = 0; i < kReadingErrorCount; ++i) {
    const auto reason = static_cast<ReadingError>(i);
    EXPECT_EQ(ReadingErrorFromString(ToString(reason)), reason);
  }
  EXPECT_EQ(ToString(ReadingError::kNonFiniteValue), "non_finite_value");
  EXPECT_FALSE(ReadingErrorFromString("fine").has_value());
}

TEST(IsValidSeriesNameTest, AppliesTheSameRulesAsTheParser) {
  ReadingError reason = ReadingError::kMalformed;
  EXPECT_TRUE(IsValidSeriesName("coldstore/freezer-1/temp_c"));
  EXPECT_FALSE(IsValidSeriesName("", &reason));
  EXPECT_EQ(reason, ReadingError::kBadSeriesName);
  EXPECT_FALSE(IsValidSeriesName(std::string(257, 'a'), &reason));
  EXPECT_EQ(reason, ReadingError::kSeriesNameTooLong);
  EXPECT_FALSE(IsValidSeriesName("a\xC2\x80", &reason));
  EXPECT_EQ(reason, ReadingError::kBadSeriesName);
  // Long printable names exercise the eight-bytes-at-a-time path; a control
  // byte at each position must still be found.
  for (std::size_t at = 0; at < 40; ++at) {
    std::string name(40, 'n');
    name[at] = '\x1F';
    EXPECT_FALSE(IsValidSeriesName(name)) << at;
    name[at] = '\x7F';
    EXPECT_FALSE(IsValidSeriesName(name)) << at;
    name[at] = '\x80';
    EXPECT_FALSE(IsValidSeriesName(name)) << at;
    name[at] = '~';
    EXPECT_TRUE(IsValidSeriesName(name)) << at;
  }
}

}  // namespace
}  // namespace plumbline
