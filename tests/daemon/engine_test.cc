// Engine: routing of series to profiles, refusals (no profile, too many series,
// late, non-finite), stable and distinct alert ids, the JSON alert line, and
// silence on the clock. The rules are DESIGN.md's contracts and daemon/engine.h
// (common practice, no source); JSON validity is checked against the grammar of
// RFC 8259 by a small parser below.
#include "daemon/engine.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <map>
#include <memory>
#include <set>
#include <string>
#include <variant>
#include <vector>

#include "config/config.h"
#include "detectors/time_format.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

using synthetic::MakeSyntheticStream;
using synthetic::SyntheticReading;
using synthetic::SyntheticStreamOptions;

// ---------------------------------------------------------------------------
// A strict little JSON parser (RFC 8259): enough to check that a line is one
// valid JSON object and to read its fields back.

struct Json;
using JsonObject = std::map<std::string, Json>;
using JsonArray = std::vector<Json>;
struct Json {
  std::variant<std::nullptr_t, bool, double, std::string, JsonArray, JsonObject> value;
};

class JsonParser {
 public:
  explicit JsonParser(std::string_view text) : text_(text) {}

  // The whole text must be exactly one value (whitespace around it allowed).
  bool ParseDocument(Json* out) {
    SkipSpace();
    if (!ParseValue(out)) return false;
    SkipSpace();
    return pos_ == text_.size();
  }

 private:
  bool ParseValue(Json* out) {
    SkipSpace();
    if (pos_ >= text_.size()) return false;
    const char c = text_[pos_];
    if (c == '{') return ParseObject(out);
    if (c == '[') return ParseArray(out);
    if (c == '"') {
      std::string s;
      if (!ParseString(&s)) return false;
      out->value = std::move(s);
      return true;
    }
    if (Literal("true")) return out->value = true, true;
    if (Literal("false")) return out->value = false, true;
    if (Literal("null")) return out->value = nullptr, true;
    return ParseNumber(out);
  }

  bool Literal(std::string_view word) {
    if (text_.substr(pos_, word.size()) != word) return false;
    pos_ += word.size();
    return true;
  }

  bool ParseObject(Json* out) {
    JsonObject object;
    ++pos_;  // {
    SkipSpace();
    if (Peek('}')) {
      ++pos_;
      out->value = std::move(object);
      return true;
    }
    while (true) {
      SkipSpace();
      std::string key;
      if (!Peek('"') || !ParseString(&key)) return false;
      if (object.count(key)) return false;  // duplicate keys: refuse (stricter than RFC)
      SkipSpace();
      if (!Peek(':')) return false;
      ++pos_;
      Json value;
      if (!ParseValue(&value)) return false;
      object.emplace(std::move(key), std::move(value));
      SkipSpace();
      if (Peek(',')) {
        ++pos_;
        continue;
      }
      if (Peek('}')) {
        ++pos_;
        out->value = std::move(object);
        return true;
      }
      return false;
    }
  }

  bool ParseArray(Json* out) {
    JsonArray array;
    ++pos_;  // [
    SkipSpace();
    if (Peek(']')) {
      ++pos_;
      out->value = std::move(array);
      return true;
    }
    while (true) {
      Json value;
      if (!ParseValue(&value)) return false;
      array.push_back(std::move(value));
      SkipSpace();
      if (Peek(',')) {
        ++pos_;
        continue;
      }
      if (Peek(']')) {
        ++pos_;
        out->value = std::move(array);
        return true;
      }
      return false;
    }
  }

  static int Hex(char c) {
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    if (c >= 'A' && c <= 'F') return c - 'A' + 10;
    return -1;
  }

  bool ParseString(std::string* out) {
    ++pos_;  // "
    while (pos_ < text_.size()) {
      const unsigned char c = static_cast<unsigned char>(text_[pos_++]);
      if (c == '"') return true;
      if (c < 0x20) return false;  // control characters must be escaped
      if (c != '\\') {
        out->push_back(static_cast<char>(c));
        continue;
      }
      if (pos_ >= text_.size()) return false;
      const char e = text_[pos_++];
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
          if (pos_ + 4 > text_.size()) return false;
          int code = 0;
          for (int k = 0; k < 4; ++k) {
            const int h = Hex(text_[pos_++]);
            if (h < 0) return false;
            code = code * 16 + h;
          }
          if (code >= 0x80) return false;  // only ASCII escapes are expected here
          out->push_back(static_cast<char>(code));
          break;
        }
        default:
          return false;
      }
    }
    return false;  // unterminated
  }

  bool ParseNumber(Json* out) {
    const size_t start = pos_;
    if (Peek('-')) ++pos_;
    if (Peek('0')) {
      ++pos_;
    } else if (Digits() == 0) {
      return false;
    }
    if (Peek('.')) {
      ++pos_;
      if (Digits() == 0) return false;
    }
    if (Peek('e') || Peek('E')) {
      ++pos_;
      if (Peek('+') || Peek('-')) ++pos_;
      if (Digits() == 0) return false;
    }
    out->value = std::stod(std::string(text_.substr(start, pos_ - start)));
    return true;
  }

  int Digits() {
    int n = 0;
    while (pos_ < text_.size() && text_[pos_] >= '0' && text_[pos_] <= '9') ++pos_, ++n;
    return n;
  }
  bool Peek(char c) const { return pos_ < text_.size() && text_[pos_] == c; }
  void SkipSpace() {
    while (pos_ < text_.size() && (text_[pos_] == ' ' || text_[pos_] == '\t' ||
                                   text_[pos_] == '\n' || text_[pos_] == '\r')) {
      ++pos_;
    }
  }

  std::string_view text_;
  size_t pos_ = 0;
};

TEST(JsonParserSelfTest, AcceptsValidAndRefusesInvalidText) {
  Json v;
  EXPECT_TRUE(
      JsonParser(R"({"a":[1,-2.5e+3,true,null],"b":"x\u0001\n"})").ParseDocument(&v));
  EXPECT_FALSE(
      JsonParser("{\"a\":\"x\ny\"}").ParseDocument(&v));  // raw control character
  EXPECT_FALSE(JsonParser(R"({"a":1,})").ParseDocument(&v));
  EXPECT_FALSE(JsonParser(R"({"a":01})").ParseDocument(&v));
  EXPECT_FALSE(JsonParser(R"({"a":nan})").ParseDocument(&v));
  EXPECT_FALSE(JsonParser(R"({"a":1}{)").ParseDocument(&v));
  EXPECT_FALSE(JsonParser(R"({"a":"\x"})").ParseDocument(&v));
}

// Parses an alert line and checks DESIGN.md's guaranteed fields and types.
JsonObject ParseAlertLine(const std::string& line, const Alert& alert) {
  Json doc;
  EXPECT_TRUE(JsonParser(line).ParseDocument(&doc)) << line;
  const auto* object = std::get_if<JsonObject>(&doc.value);
  if (!object) {
    ADD_FAILURE() << "not an object: " << line;
    return {};
  }
  auto string_field = [&](const char* name) -> std::string {
    auto it = object->find(name);
    if (it == object->end() || !std::holds_alternative<std::string>(it->second.value)) {
      ADD_FAILURE() << "missing string field " << name << ": " << line;
      return "";
    }
    return std::get<std::string>(it->second.value);
  };
  EXPECT_EQ(string_field("series"), alert.series);
  EXPECT_EQ(string_field("id"), alert.id);
  EXPECT_EQ(string_field("event"), ToString(alert.event));
  const std::string kind = string_field("kind");
  EXPECT_TRUE(kind == "level" || kind == "variance" || kind == "rate" ||
              kind == "silence")
      << kind;
  const std::string direction = string_field("direction");
  EXPECT_TRUE(direction == "up" || direction == "down" || direction == "none")
      << direction;
  for (const char* name : {"detected_at", "change_at"}) {
    const std::string text = string_field(name);
    EXPECT_FALSE(text.empty());
    EXPECT_EQ(text.back(), 'Z') << text;  // UTC
    EXPECT_EQ(text.size() >= 20 ? text[10] : ' ', 'T') << text;
    const auto parsed = ParseTime(text);
    EXPECT_TRUE(parsed.ok()) << text;
    if (parsed.ok()) {
      EXPECT_EQ(*parsed,
                std::string(name) == "detected_at" ? alert.detected_at : alert.change_at);
    }
  }
  EXPECT_EQ(string_field("severity"), ToString(alert.severity));
  auto it = object->find("detectors");
  if (it == object->end() || !std::holds_alternative<JsonArray>(it->second.value)) {
    ADD_FAILURE() << "missing detectors array: " << line;
  } else {
    const auto& array = std::get<JsonArray>(it->second.value);
    EXPECT_EQ(array.size(), alert.detectors.size());
    for (size_t i = 0; i < array.size() && i < alert.detectors.size(); ++i) {
      const auto* name = std::get_if<std::string>(&array[i].value);
      EXPECT_TRUE(name && *name == alert.detectors[i]) << line;
    }
  }
  return *object;
}

// ---------------------------------------------------------------------------
// Helpers

ProfileOptions Profile(std::string match, SeriesKind kind = SeriesKind::kGauge) {
  ProfileOptions p;
  p.match = std::move(match);
  p.kind = kind;
  return p;
}

Config MakeConfig(std::vector<ProfileOptions> profiles) {
  Config config;
  config.series = std::move(profiles);
  return config;
}

constexpr EventTime kStart = 1'772'323'200LL * kMicrosPerSecond;  // 2026-03-01T00:00:00Z
constexpr EventTime kMinute = kMicrosPerMinute;

// ---------------------------------------------------------------------------
// Routing and refusals

TEST(EngineRoutingTest, SeriesGoesToTheFirstMatchingProfile) {
  // "plant/a/energy" matches both profiles; the first (meter) must win.
  Engine engine(MakeConfig({Profile("plant/*/energy", SeriesKind::kMeter),
                            Profile("plant/**", SeriesKind::kCount)}));
  std::vector<Alert> out;
  for (int i = 0; i < 5; ++i) {
    const EventTime t = kStart + i * 10 * kMinute;
    ASSERT_EQ(engine.Ingest("plant/a/energy", t, 100.0 + i, &out),
              IngestOutcome::kAccepted);
    ASSERT_EQ(engine.Ingest("plant/b/doors", t, 3.0, &out), IngestOutcome::kAccepted);
  }
  ASSERT_NE(engine.Find("plant/a/energy"), nullptr);
  ASSERT_NE(engine.Find("plant/b/doors"), nullptr);
  // A meter's first total is only a baseline; a count's every reading is an observation.
  EXPECT_EQ(engine.Find("plant/a/energy")->observations(), 4);
  EXPECT_EQ(engine.Find("plant/b/doors")->observations(), 5);
  // A falling total is a meter reset for the meter, and nothing special for the count.
  out.clear();
  engine.Ingest("plant/a/energy", kStart + 60 * kMinute, 1.0, &out);
  engine.Ingest("plant/b/doors", kStart + 60 * kMinute, 0.0, &out);
  ASSERT_EQ(out.size(), 1u);
  EXPECT_EQ(out[0].series, "plant/a/energy");
  EXPECT_EQ(out[0].event, EventType::kMeterReset);
  EXPECT_EQ(out[0].before, 104.0);
  EXPECT_EQ(out[0].after, 1.0);
  EXPECT_EQ(engine.series_count(), 2u);
}

// Records what a monitor tells its listener.
struct RecordingListener : ObservationListener {
  void Observed(const SeriesMonitor& monitor, EventTime from, EventTime to,
                double value) override {
    seen.push_back({to, value});
    spans.push_back(to - from);
    numbers.push_back(monitor.observations());
  }
  std::vector<std::pair<EventTime, double>> seen;
  std::vector<EventTime> spans;
  std::vector<long long> numbers;
};

TEST(EngineListenerTest, ABucketedSeriesIsHeardOncePerBucketAtItsEnd) {
  ProfileOptions doors = Profile("dock/doors", SeriesKind::kCount);
  doors.every = kMicrosPerHour;
  doors.gaps = GapPolicy::kZero;
  Engine engine(MakeConfig({doors, Profile("dock/**")}));
  RecordingListener listener;
  engine.SetObservationListener("dock/doors", &listener);
  std::vector<Alert> out;
  // Hour 0: the first openings (a bucket the data do not cover from its start
  // is no observation: detectors/intake.h); hour 1: three; hour 2: none;
  // hour 3: two, the first of which closes hours 1 and 2 at once (an empty
  // hour counts zero); then one in hour 4, which closes hour 3.
  for (const int minute : {5, 20, 65, 80, 110, 190, 200, 245}) {
    ASSERT_EQ(engine.Ingest("dock/doors", kStart + minute * kMinute, 1.0, &out),
              IngestOutcome::kAccepted);
    ASSERT_EQ(engine.Ingest("dock/other", kStart + minute * kMinute, 1.0, &out),
              IngestOutcome::kAccepted);
  }
  const std::vector<std::pair<EventTime, double>> expected = {
      {kStart + 2 * kMicrosPerHour, 3.0},
      {kStart + 3 * kMicrosPerHour, 0.0},
      {kStart + 4 * kMicrosPerHour, 2.0}};
  EXPECT_EQ(listener.seen, expected);
  // Each is told with the hour it spans.
  EXPECT_EQ(listener.spans, std::vector<EventTime>(3, kMicrosPerHour));
  EXPECT_EQ(listener.numbers, (std::vector<long long>{1, 2, 3}));
  // Another series is not heard; nobody is heard once the listener is taken away.
  engine.SetObservationListener("dock/doors", nullptr);
  engine.Ingest("dock/doors", kStart + 310 * kMinute, 1.0, &out);
  EXPECT_EQ(listener.seen.size(), 3u);
}

TEST(EngineRoutingTest, SeriesMatchingNoProfileIsRefused) {
  Engine engine(MakeConfig({Profile("plant/**")}));
  std::vector<Alert> out;
  EXPECT_EQ(engine.Ingest("office/printer/pages", kStart, 1.0, &out),
            IngestOutcome::kNoProfile);
  EXPECT_EQ(engine.Ingest("plant", kStart, 1.0, &out), IngestOutcome::kNoProfile);
  EXPECT_EQ(engine.series_count(), 0u);
  EXPECT_EQ(engine.Find("office/printer/pages"), nullptr);
  EXPECT_EQ(engine.Ingest("plant/x", kStart, 1.0, &out), IngestOutcome::kAccepted);
  EXPECT_EQ(engine.series_count(), 1u);
  EXPECT_TRUE(out.empty());
  EXPECT_TRUE(engine.design_status().ok());
}

TEST(EngineRoutingTest, MaxSeriesRefusesNewSeriesWhileExistingOnesKeepWorking) {
  EngineOptions options;
  options.max_series = 2;
  ASSERT_TRUE(options.IsValid(nullptr));
  Engine engine(MakeConfig({Profile("**")}), options);
  std::vector<Alert> out;
  EXPECT_EQ(engine.Ingest("a", kStart, 1.0, &out), IngestOutcome::kAccepted);
  EXPECT_EQ(engine.Ingest("b", kStart, 1.0, &out), IngestOutcome::kAccepted);
  EXPECT_EQ(engine.Ingest("c", kStart, 1.0, &out), IngestOutcome::kTooManySeries);
  EXPECT_EQ(engine.series_count(), 2u);
  EXPECT_EQ(engine.Find("c"), nullptr);
  for (int i = 1; i <= 20; ++i) {
    const EventTime t = kStart + i * kMinute;
    EXPECT_EQ(engine.Ingest("a", t, 1.0 + 0.1 * i, &out), IngestOutcome::kAccepted);
    EXPECT_EQ(engine.Ingest("b", t, 2.0, &out), IngestOutcome::kAccepted);
    EXPECT_EQ(engine.Ingest("c", t, 3.0, &out), IngestOutcome::kTooManySeries);
  }
  EXPECT_EQ(engine.Find("a")->observations(), 21);
  EXPECT_EQ(engine.Find("b")->observations(), 21);
  EngineOptions zero;
  zero.max_series = 0;
  std::string why;
  EXPECT_FALSE(zero.IsValid(&why));
  EXPECT_NE(why.find("max_series"), std::string::npos) << why;
}

TEST(EngineRoutingTest, LateAndNonFiniteReadingsAreRefusedWithTheirReason) {
  Engine engine(MakeConfig({Profile("**")}));
  std::vector<Alert> out;
  // A non-finite first reading does not create the series.
  EXPECT_EQ(engine.Ingest("s", kStart, std::numeric_limits<double>::quiet_NaN(), &out),
            IngestOutcome::kNotFinite);
  EXPECT_EQ(engine.series_count(), 0u);
  EXPECT_EQ(engine.Ingest("s", kStart, 1.0, &out), IngestOutcome::kAccepted);
  EXPECT_EQ(
      engine.Ingest("s", kStart + kMinute, std::numeric_limits<double>::infinity(), &out),
      IngestOutcome::kNotFinite);
  EXPECT_EQ(engine.Ingest("s", kStart + 2 * kMinute, 1.0, &out),
            IngestOutcome::kAccepted);
  EXPECT_EQ(engine.Ingest("s", kStart + kMinute, 1.0, &out), IngestOutcome::kLate);
  EXPECT_EQ(engine.Find("s")->observations(), 2);
  EXPECT_EQ(ToString(IngestOutcome::kLate), "late");
  EXPECT_EQ(ToString(IngestOutcome::kNoProfile), "no_profile");
  EXPECT_EQ(ToString(IngestOutcome::kTooManySeries), "too_many_series");
  EXPECT_EQ(ToString(IngestOutcome::kNotFinite), "non_finite_value");
}

TEST(EngineRoutingTest, FinishReleasesReadingsHeldForReordering) {
  ProfileOptions profile = Profile("**");
  profile.lateness = 30 * kMinute;
  Engine engine(MakeConfig({profile}));
  std::vector<Alert> out;
  for (int i = 0; i < 10; ++i) engine.Ingest("s", kStart + i * 10 * kMinute, 1.0, &out);
  const long long before = engine.Find("s")->observations();
  EXPECT_LT(before, 10);  // the newest ones are still held
  engine.Finish(&out);
  EXPECT_EQ(engine.Find("s")->observations(), 10);
}

// ---------------------------------------------------------------------------
// A multi-series replay with a level step, a dropout (silence and resume), a
// meter reset and retrain events, driven like `plumbline replay` (the clock
// advances to each reading's time before it is ingested).

struct Reading {
  std::string series;
  EventTime time;
  double value;
};

std::vector<Reading> ReplayInput(std::uint64_t seed) {
  std::vector<Reading> all;
  SyntheticStreamOptions options;
  options.gap_probability = 0;
  options.change_index = 3200;
  options.level_shift = 3.0;
  for (const auto& r : MakeSyntheticStream(options, 3600, seed)) {
    all.push_back({"coldstore/freezer-1/temp_c", r.time, r.value});
  }
  options.change_index = -1;
  options.level_shift = 0;
  const auto quiet = MakeSyntheticStream(options, 3600, seed + 1);
  for (size_t i = 0; i < quiet.size(); ++i) {
    // A dropout of a day in the middle.
    if (quiet[i].time > kStart + 14 * kMicrosPerDay &&
        quiet[i].time < kStart + 15 * kMicrosPerDay) {
      continue;
    }
    all.push_back(
        {"coldstore/compressor-2/power_kw", quiet[i].time, quiet[i].value + 50});
  }
  double total = 1000;
  for (int i = 0; i < 600; ++i) {
    total = i == 400 ? 3.0 : total + 5.0 + 0.1 * (i % 7);
    all.push_back(
        {"coldstore/main/energy_kwh", kStart + (i + 1) * kMicrosPerHour, total});
  }
  std::stable_sort(all.begin(), all.end(),
                   [](const Reading& a, const Reading& b) { return a.time < b.time; });
  return all;
}

Config ReplayConfig() {
  ProfileOptions meter = Profile("coldstore/*/energy_kwh", SeriesKind::kMeter);
  meter.seasons = {kMicrosPerDay};
  ProfileOptions gauges = Profile("coldstore/**");
  gauges.silence_after = 2 * kMicrosPerHour;
  return MakeConfig({meter, gauges});
}

std::vector<Alert> RunReplay(const std::vector<Reading>& input) {
  Engine engine(ReplayConfig());
  std::vector<Alert> out;
  for (const Reading& r : input) {
    engine.AdvanceClock(r.time, &out);
    EXPECT_EQ(engine.Ingest(r.series, r.time, r.value, &out), IngestOutcome::kAccepted);
  }
  engine.Finish(&out);
  EXPECT_TRUE(engine.design_status().ok());
  return out;
}

TEST(EngineAlertTest, AlertIdsAreStableAcrossRunsAndDistinct) {
  const auto input = ReplayInput(61);
  const auto first = RunReplay(input);
  const auto second = RunReplay(input);
  ASSERT_EQ(first.size(), second.size());
  std::set<std::string> ids;
  std::map<std::string, int> by_type;
  for (size_t i = 0; i < first.size(); ++i) {
    EXPECT_EQ(first[i].id, second[i].id);
    EXPECT_EQ(AlertToJson(first[i]), AlertToJson(second[i]));
    EXPECT_EQ(first[i].id.size(), 16u);
    EXPECT_EQ(first[i].id.find_first_not_of("0123456789abcdef"), std::string::npos);
    ids.insert(first[i].id);
    ++by_type[std::string(ToString(first[i].event)) + "/" +
              std::string(ToString(first[i].kind))];
  }
  std::printf("[figures] replay events:");
  for (const auto& [type, n] : by_type) std::printf(" %s %d", type.c_str(), n);
  std::printf("\n");
  EXPECT_EQ(ids.size(), first.size());  // distinct
  // The replay exercised every event type.
  EXPECT_GE(by_type["alert/level"], 1);
  EXPECT_GE(by_type["alert/silence"], 1);
  EXPECT_GE(by_type["resume/silence"], 1);
  EXPECT_GE(by_type["retrain/level"], 1);
  EXPECT_GE(by_type["meter-reset/level"], 1);
}

TEST(EngineAlertTest, SameEventOnAnotherSeriesHasAnotherId) {
  std::vector<Reading> input;
  for (const char* name : {"a/x", "a/y"}) {
    for (const auto& r : MakeSyntheticStream(SyntheticStreamOptions{}, 300, 5)) {
      input.push_back({name, r.time, r.value});
    }
  }
  std::stable_sort(input.begin(), input.end(),
                   [](const Reading& a, const Reading& b) { return a.time < b.time; });
  ProfileOptions profile = Profile("**");
  profile.silence_after = kMicrosPerHour;
  Engine engine(MakeConfig({profile}));
  std::vector<Alert> out;
  for (const Reading& r : input) engine.Ingest(r.series, r.time, r.value, &out);
  out.clear();
  engine.AdvanceClock(input.back().time + 2 * kMicrosPerHour, &out);
  ASSERT_EQ(out.size(), 2u);  // identical silences on both series
  EXPECT_EQ(out[0].detected_at, out[1].detected_at);
  EXPECT_EQ(out[0].change_at, out[1].change_at);
  EXPECT_NE(out[0].series, out[1].series);
  EXPECT_NE(out[0].id, out[1].id);
}

TEST(EngineAlertTest, EveryEventOfAReplayIsOneValidJsonObjectWithTheGuaranteedFields) {
  const auto alerts = RunReplay(ReplayInput(62));
  ASSERT_FALSE(alerts.empty());
  for (const Alert& a : alerts) {
    SCOPED_TRACE(AlertToJson(a));
    const std::string line = AlertToJson(a);
    EXPECT_EQ(line.find('\n'), std::string::npos);
    const JsonObject object = ParseAlertLine(line, a);
    EXPECT_LE(a.change_at, a.detected_at);
    if (a.event == EventType::kRetrain) {
      EXPECT_TRUE(object.count("retrain_from"));
      EXPECT_TRUE(object.count("retrain_to"));
    }
  }
}

TEST(EngineAlertTest, AlertToJsonMatchesTheExpectedLineAndEscapesControlCharacters) {
  Alert a;
  a.id = "00112233445566ff";
  a.series = "plant/\"a\"\\b\n\t\r\x01\x1f/\xc3\xa9";
  a.event = EventType::kAlert;
  a.kind = AlertKind::kLevel;
  a.direction = Direction::kUp;
  a.detected_at = kStart + 12 * kMicrosPerHour;
  a.change_at = kStart + 11 * kMicrosPerHour + 250'000;  // .250 s
  a.detectors = {"cusum", "page-hinkley"};
  a.magnitude = 1.5;
  a.magnitude_sd = 3.0;
  a.before = 20.0;
  a.after = 21.5;
  const std::string expected =
      R"({"id":"00112233445566ff","event":"alert","series":"plant/\"a\"\\b\n\t\r\u0001\u001f/)"
      "\xc3\xa9"
      R"(","kind":"level","direction":"up","detected_at":"2026-03-01T12:00:00Z",)"
      R"("change_at":"2026-03-01T11:00:00.250Z","detectors":["cusum","page-hinkley"],)"
      R"("magnitude":1.5,"magnitude_sd":3,"before":20,"after":21.5,"severity":"record",)"
      R"("advisory":true})";
  EXPECT_EQ(AlertToJson(a), expected);
  ParseAlertLine(AlertToJson(a), a);  // the name reads back
  // Every control character 0x00-0x1f is escaped, so the line stays one valid line.
  Alert controls = a;
  controls.series.clear();
  for (int c = 0; c < 0x20; ++c) controls.series.push_back(static_cast<char>(c));
  controls.series += "\x7f";
  const std::string line = AlertToJson(controls);
  for (char c : line) EXPECT_GE(static_cast<unsigned char>(c), 0x20u);
  ParseAlertLine(line, controls);
}

TEST(EngineAlertTest, NonFiniteMagnitudesBecomeJsonNull) {
  Alert a;
  a.id = "0000000000000001";
  a.series = "s";
  a.magnitude = std::numeric_limits<double>::infinity();
  a.magnitude_sd = std::numeric_limits<double>::quiet_NaN();
  const std::string line = AlertToJson(a);
  EXPECT_NE(line.find("\"magnitude\":null"), std::string::npos) << line;
  EXPECT_NE(line.find("\"magnitude_sd\":null"), std::string::npos) << line;
  ParseAlertLine(line, a);
}

// ---------------------------------------------------------------------------
// Silence on the clock

TEST(EngineSilenceTest, AdvanceClockReportsSilenceForTheStoppedSeriesOnly) {
  ProfileOptions timed = Profile("site/timed/*");
  timed.silence_after = kMicrosPerHour;
  ProfileOptions untimed = Profile("site/**");  // adaptive: needs a learned arrival model
  Engine engine(MakeConfig({timed, untimed}));
  std::vector<Alert> out;
  const EventTime stop = kStart + 5 * kMicrosPerHour;
  for (EventTime t = kStart; t <= kStart + 10 * kMicrosPerHour; t += 10 * kMinute) {
    engine.AdvanceClock(t, &out);
    engine.Ingest("site/timed/busy", t, 1.0, &out);
    if (t <= stop) engine.Ingest("site/timed/quiet", t, 1.0, &out);
    if (t <= stop)
      engine.Ingest("site/other", t, 1.0, &out);  // stops too, no silence_after
  }
  std::vector<Alert> silences;
  for (const Alert& a : out) {
    if (a.kind == AlertKind::kSilence) silences.push_back(a);
  }
  ASSERT_EQ(silences.size(), 1u);
  EXPECT_EQ(silences[0].series, "site/timed/quiet");
  EXPECT_EQ(silences[0].event, EventType::kAlert);
  EXPECT_EQ(silences[0].change_at, stop);
  EXPECT_EQ(silences[0].detected_at, stop + kMicrosPerHour);
  EXPECT_EQ(silences[0].detectors, std::vector<std::string>{"silence-timer"});
  EXPECT_TRUE(engine.Find("site/timed/quiet")->silent());
  EXPECT_FALSE(engine.Find("site/timed/busy")->silent());
  // Not before its deadline, and only once however far the clock runs.
  out.clear();
  engine.AdvanceClock(kStart + 40 * kMicrosPerHour, &out);
  // The busy series stopped at 10 h: it alone is reported now.
  ASSERT_EQ(out.size(), 1u);
  EXPECT_EQ(out[0].series, "site/timed/busy");
  EXPECT_EQ(out[0].detected_at, kStart + 11 * kMicrosPerHour);
  out.clear();
  engine.AdvanceClock(kStart + 80 * kMicrosPerHour, &out);
  EXPECT_TRUE(out.empty());
  // A reading resumes the quiet series.
  engine.Ingest("site/timed/quiet", kStart + 81 * kMicrosPerHour, 1.0, &out);
  ASSERT_EQ(out.size(), 1u);
  EXPECT_EQ(out[0].event, EventType::kResume);
  EXPECT_EQ(out[0].series, "site/timed/quiet");
  EXPECT_TRUE(out[0].detectors.empty());
}

}  // namespace
}  // namespace plumbline
