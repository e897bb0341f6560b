// The pieces behind the operator views: the per-series point ring and the
// decimation of long series (series_trace.h), the truth file and its scoring
// (replay_report.h), coloured alert lines (terminal.h) and the pages
// themselves (ui_pages.h). The rules checked are the headers' own; common
// practice, no published source.
#include <gtest/gtest.h>

#include <cmath>

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
  EXPECT_FALSE(TracePointBefore(nullptr, 5, 2.0).has_forecast());
  EXPECT_EQ(TracePointBefore(nullptr, 5, 2.0).value, 2.0);
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
