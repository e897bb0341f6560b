// SeriesMonitor::DetectorSnapshots and RunLength: the read-only views the HTTP
// API (GET /v1/series/{name}) and the per-series metrics show. Properties
// only (common practice, no source): which detectors are listed and in what
// order, that thresholds are the positive values the detectors fire at, and
// that BOCPD's view exists exactly when the profile runs BOCPD.
#include <gtest/gtest.h>

#include <cmath>
#include <string_view>
#include <vector>

#include "detectors/series_monitor.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

std::vector<std::string_view> Names(const std::vector<SeriesMonitor::DetectorSnapshot>& all) {
  std::vector<std::string_view> names;
  for (const auto& s : all) names.push_back(s.name);
  return names;
}

void FeedStream(SeriesMonitor& monitor, long long count) {
  synthetic::SyntheticStreamOptions options;
  options.gap_probability = 0.0;
  std::vector<SeriesEvent> events;
  for (const auto& reading : synthetic::MakeSyntheticStream(options, count, /*seed=*/7)) {
    monitor.Observe(reading.time, reading.value, &events);
  }
}

TEST(SeriesMonitorSnapshotTest, ListsLevelDetectorsInProfileOrderThenVarianceAndRate) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kPageHinkley, DetectorKind::kBocpd, DetectorKind::kCusum,
                       DetectorKind::kEwma};
  profile.agree = 1;
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok()) << design.status().ToString();
  SeriesMonitor monitor(&*design);
  FeedStream(monitor, 400);
  const auto snapshots = monitor.DetectorSnapshots();
  EXPECT_EQ(Names(snapshots), (std::vector<std::string_view>{
                                  "page-hinkley", "bocpd", "cusum", "ewma", "variance", "rate"}));
  for (const auto& s : snapshots) {
    EXPECT_TRUE(std::isfinite(s.statistic)) << s.name;
    EXPECT_GE(s.statistic, 0.0) << s.name;
    EXPECT_GT(s.threshold, 0.0) << s.name;
    EXPECT_TRUE(std::isfinite(s.threshold)) << s.name;
  }
  EXPECT_LT(snapshots[1].threshold, 1.0);  // BOCPD fires on a probability
  const auto run_length = monitor.RunLength();
  ASSERT_TRUE(run_length.has_value());
  EXPECT_GE(run_length->most_likely, 0);
  EXPECT_LE(run_length->most_likely, 400);
  EXPECT_GE(run_length->change_probability, 0.0);
  EXPECT_LE(run_length->change_probability, 1.0);
}

TEST(SeriesMonitorSnapshotTest, NoRunLengthWithoutBocpd) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kCusum};
  profile.agree = 1;
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok()) << design.status().ToString();
  SeriesMonitor monitor(&*design);
  FeedStream(monitor, 100);
  EXPECT_FALSE(monitor.RunLength().has_value());
  EXPECT_EQ(Names(monitor.DetectorSnapshots()),
            (std::vector<std::string_view>{"cusum", "variance", "rate"}));
}

}  // namespace
}  // namespace plumbline
