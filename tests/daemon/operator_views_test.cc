// The pieces behind the operator views: the per-series point ring and the
// decimation of long series (series_trace.h), the truth file and its scoring
// (replay_report.h), coloured alert lines (terminal.h) and the pages
// themselves (ui_pages.h). The rules checked are the headers' own; common
// practice, no published source.
#include <gtest/gtest.h>

#include <cmath>
#include <numbers>
#include <vector>

#include "config/config.h"
#include "daemon/engine.h"
#include "daemon/replay_report.h"
#include "daemon/series_trace.h"
#include "daemon/terminal.h"
#include "daemon/ui_pages.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

TracePoint Point(EventTime time, double value) {
  TracePoint p;
  p.time = time;
  p.value = value;
  return p;
}

TEST(PointRingTest, KeepsTheNewestCapacityPointsOldestFirst) {
  PointRing ring;
  for (int i = 0; i < 10; ++i) ring.Push(Point(i, i * 1.5), 4);
  const std::vector<TracePoint> points = ring.Points();
  ASSERT_EQ(points.size(), 4u);
  for (int i = 0; i < 4; ++i) EXPECT_EQ(points[i].time, 6 + i);
}

TEST(PointRingTest, CapacityZeroKeepsNothing) {
  PointRing ring;
  ring.Push(Point(1, 1.0), 0);
  EXPECT_EQ(ring.size(), 0u);
}

TEST(PointRingTest, PointWithoutForecastSaysSo) {
  EXPECT_FALSE(
      TracePointAfter(nullptr, TraceStateBefore(nullptr), 5, 2.0).has_forecast());
  EXPECT_EQ(TracePointAfter(nullptr, TraceStateBefore(nullptr), 5, 2.0).value, 2.0);
}

// A gauge fed one reading a minute (a daily cycle and a deterministic wobble),
// with `lateness` for reordering; the trace point of each reading next to the
// forecast the model would have made for it just before it was fed.
struct TracedReading {
  TracePoint point;
  bool expected = false;  // the model had data before the reading
  double forecast = 0.0, band = 0.0;
};
std::vector<TracedReading> TraceGauge(EventTime lateness, int readings) {
  ProfileOptions profile;
  profile.match = "**";
  profile.seasons = {kMicrosPerDay};
  profile.lateness = lateness;
  Config config;
  config.series = {profile};
  Engine engine(config);
  const EventTime start = 1'772'323'200LL * kMicrosPerSecond;
  std::vector<TracedReading> traced;
  std::vector<Alert> alerts;
  for (int i = 0; i < readings; ++i) {
    const EventTime t = start + i * kMicrosPerMinute + (i % 7) * kMicrosPerSecond;
    const double value = 20.0 + 3.0 * std::sin(2.0 * std::numbers::pi * i / 1440.0) +
                         0.3 * std::sin(i * 1.7);
    TracedReading r;
    const SeriesMonitor* before = engine.Find("line/temp");
    if (before && before->forecaster() && before->forecaster()->has_data()) {
      const Forecast f = before->forecaster()->Predict(t);
      r.expected = true;
      r.forecast = f.value;
      r.band = kBandZ * before->scale().sigma() *
               std::sqrt(1.0 + std::max(0.0, f.parameter_variance_factor));
    }
    const TraceBefore state = TraceStateBefore(before);
    EXPECT_EQ(engine.Ingest("line/temp", t, value, &alerts), IngestOutcome::kAccepted);
    r.point = TracePointAfter(engine.Find("line/temp"), state, t, value);
    traced.push_back(r);
  }
  return traced;
}

TEST(TracePointTest, ForecastIsTheOneTheModelMadeBeforeTheReading) {
  // Without reordering each reading is folded in at once, and its point takes
  // the forecast that update began with: the one Predict gave just before.
  const std::vector<TracedReading> traced = TraceGauge(0, 600);
  ASSERT_FALSE(traced.front().point.has_forecast());  // nothing learned yet
  int compared = 0;
  for (const TracedReading& r : traced) {
    EXPECT_EQ(r.point.has_forecast(), r.expected) << r.point.time;
    if (!r.expected || !r.point.has_forecast()) continue;
    ++compared;
    EXPECT_NEAR(r.point.forecast, r.forecast, 1e-5 * std::abs(r.forecast))
        << r.point.time;
    EXPECT_NEAR(r.point.band, r.band, 1e-5 * r.band + 1e-9) << r.point.time;
  }
  // All but the first few, which the monitor holds while it sizes its model.
  EXPECT_GE(compared, 590);
}

TEST(TracePointTest, ReadingHeldForReorderingStillGetsAForecast) {
  // With 10 minutes of lateness a reading waits until readings 10 minutes newer
  // have come; its point then carries the forecast made when it arrived, from
  // a model that has not reached its time.
  const std::vector<TracedReading> traced = TraceGauge(10 * kMicrosPerMinute, 600);
  int with_forecast = 0;
  for (const TracedReading& r : traced) {
    if (r.point.has_forecast()) {
      ++with_forecast;
      EXPECT_TRUE(std::isfinite(r.point.band) && r.point.band >= 0) << r.point.time;
    } else {
      EXPECT_EQ(with_forecast, 0)
          << "a reading after the first forecast lost its own, at " << r.point.time;
    }
  }
  // All but the first few: the monitor holds some while it sizes its model,
  // and the model's first update waits for the lateness.
  EXPECT_GE(with_forecast, 575);
}

TEST(DecimateTest, KeepsEverySpikeAndStaysWithinTheBudget) {
  std::vector<TracePoint> points;
  for (int i = 0; i < 100000; ++i) points.push_back(Point(i, std::sin(i * 0.001)));
  points[31337].value = 50.0;   // one spike up
  points[77777].value = -50.0;  // one down
  const std::vector<TracePoint> drawn = Decimate(points, 1000);
  EXPECT_LE(drawn.size(), 1000u);
  EXPECT_GE(drawn.size(), 900u);
  bool up = false, down = false;
  for (std::size_t i = 0; i < drawn.size(); ++i) {
    up = up || drawn[i].value == 50.0;
    down = down || drawn[i].value == -50.0;
    if (i > 0) {
      EXPECT_LT(drawn[i - 1].time, drawn[i].time);  // still in time order
    }
  }
  EXPECT_TRUE(up);
  EXPECT_TRUE(down);
}

TEST(DecimateTest, ShortSeriesAreLeftAsTheyAre) {
  std::vector<TracePoint> points = {Point(1, 1), Point(2, 3), Point(3, 2)};
  EXPECT_EQ(Decimate(points, 1000).size(), 3u);
}

EventTime At(const char* text) { return *ParseTime(text); }

TEST(TruthTest, ParsesLabelsWithDefaultWindowsCommentsAndAHeader) {
  const auto labels = ParseTruth(
      "# seal failure\n"
      "series,kind,at,from,to,label\n"
      "coldstore/freezer-1/temp_c,level,2026-03-18T14:20:00Z,,,door seal\n"
      "coldstore/main/energy_kwh, any ,2026-03-18T14:20:00Z,2026-03-17T00:00:00Z,"
      "2026-03-20T00:00:00Z\n");
  ASSERT_TRUE(labels.ok()) << labels.status().message();
  ASSERT_EQ(labels->size(), 2u);
  EXPECT_EQ((*labels)[0].kind, AlertKind::kLevel);
  EXPECT_EQ((*labels)[0].from, At("2026-03-18T08:20:00Z"));  // at - 6 h
  EXPECT_EQ((*labels)[0].to, At("2026-03-18T20:20:00Z"));
  EXPECT_EQ((*labels)[0].label, "door seal");
  EXPECT_FALSE((*labels)[1].kind);  // any
  EXPECT_EQ((*labels)[1].from, At("2026-03-17T00:00:00Z"));
  EXPECT_EQ((*labels)[1].label, "coldstore/main/energy_kwh any");
}

TEST(TruthTest, ABadLineIsReportedWithItsNumber) {
  const auto labels =
      ParseTruth("a,level,2026-03-18T14:20:00Z\nb,tilt,2026-03-18T14:20:00Z\n");
  ASSERT_FALSE(labels.ok());
  EXPECT_EQ(labels.status().message().rfind("2: kind", 0), 0u)
      << labels.status().message();
}

Alert MakeAlert(const char* series, AlertKind kind, const char* change_at,
                const char* detected_at, std::string annotation = "") {
  Alert a;
  a.series = series;
  a.kind = kind;
  a.change_at = At(change_at);
  a.detected_at = At(detected_at);
  a.annotation = std::move(annotation);
  return a;
}

TEST(TruthTest, ScoresHitsMissesDelaysAndFalseAlarms) {
  const auto labels = ParseTruth(
      "f,level,2026-03-18T14:20:00Z,,,seal\n"
      "f,silence,2026-04-09T21:00:00Z,,,dropout\n");
  ASSERT_TRUE(labels.ok());
  const std::vector<Alert> alerts = {
      MakeAlert("f", AlertKind::kLevel, "2026-03-05T01:00:00Z", "2026-03-05T02:00:00Z"),
      MakeAlert("f", AlertKind::kLevel, "2026-03-18T14:17:00Z", "2026-03-18T14:41:00Z"),
      MakeAlert("f", AlertKind::kLevel, "2026-03-18T15:00:00Z", "2026-03-18T19:00:00Z"),
      MakeAlert("f", AlertKind::kLevel, "2026-04-01T00:10:00Z", "2026-04-01T03:00:00Z",
                "defrost"),  // expected: not a false alarm
      MakeAlert("g", AlertKind::kLevel, "2026-03-18T14:20:00Z", "2026-03-18T15:00:00Z"),
  };
  const TruthOutcome outcome = ScoreTruth(*labels, alerts);
  ASSERT_EQ(outcome.labels.size(), 2u);
  ASSERT_TRUE(outcome.labels[0].hit);  // the first alert in the window
  EXPECT_EQ(outcome.labels[0].hit->detected_at, At("2026-03-18T14:41:00Z"));
  EXPECT_FALSE(outcome.labels[1].hit);
  EXPECT_EQ(outcome.hits(), 1u);
  ASSERT_EQ(outcome.false_alarms.size(), 2u);  // 5 March on f, and g
  EXPECT_EQ(outcome.false_alarms[0].detected_at, At("2026-03-05T02:00:00Z"));
  EXPECT_EQ(outcome.false_alarms[1].series, "g");
}

TEST(AlertLineTest, WithoutColourItIsTheReadableLine) {
  const Alert a = MakeAlert("coldstore/freezer-1/temp_c", AlertKind::kLevel,
                            "2026-03-18T14:17:00Z", "2026-03-18T14:41:00Z");
  EXPECT_EQ(AlertLine(a, false), AlertToText(a));
}

TEST(AlertLineTest, ColourWrapsTimeKindAndSeriesAndKeepsTheText) {
  const Alert a = MakeAlert("coldstore/freezer-1/temp_c", AlertKind::kLevel,
                            "2026-03-18T14:17:00Z", "2026-03-18T14:41:00Z");
  const std::string coloured = AlertLine(a, true);
  EXPECT_NE(coloured.find("\033[1m" + a.series + "\033[0m"), std::string::npos);
  EXPECT_EQ(coloured.rfind("\033[2m2026-03-18T14:41:00Z\033[0m", 0), 0u);
  std::string plain;  // the escapes removed give the plain line back
  for (std::size_t i = 0; i < coloured.size(); ++i) {
    if (coloured[i] == '\033') {
      i = coloured.find('m', i);
      continue;
    }
    plain += coloured[i];
  }
  EXPECT_EQ(plain, AlertToText(a));
}

TEST(UiPagesTest, StatusPageIsOneFileWithNoOutsideAssets) {
  const std::string& page = StatusPageHtml();
  EXPECT_NE(page.find("PlumblineChart"), std::string::npos);  // the chart is inline
  EXPECT_NE(page.find("prefers-color-scheme: dark"), std::string::npos);
  EXPECT_EQ(page.find("/*@"), std::string::npos);  // every marker filled
  EXPECT_EQ(page.find("http://"), page.find("http://www.w3.org/2000/svg"));
  EXPECT_EQ(page.find("https://"), std::string::npos);
  EXPECT_EQ(page.find("<link"), std::string::npos);
  EXPECT_EQ(page.find(" src="), std::string::npos);
}

TEST(UiPagesTest, ReportDataCannotCloseItsScriptElement) {
  const std::string page = ReportPageHtml("{\"name\":\"</script><b>\"}");
  EXPECT_EQ(page.find("</script><b>"), std::string::npos);
  EXPECT_NE(page.find("<\\/script><b>"), std::string::npos);
}

}  // namespace
}  // namespace plumbline
