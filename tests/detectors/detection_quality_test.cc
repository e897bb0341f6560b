// Detection quality of the whole per-series pipeline on seeded synthetic
// streams with daily and weekly seasons, trend, jittered timestamps and gaps
// (tests/support/synthetic_stream.h), at arl0 = 5000. Acceptance figures are the
// product's own targets (common practice, no source); the measured figures are
// printed so they can be reported.
#include <algorithm>
#include <cstdio>
#include <vector>

#include <gtest/gtest.h>

#include "detectors/series_monitor.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

using synthetic::MakeSyntheticStream;
using synthetic::SyntheticReading;
using synthetic::SyntheticStreamOptions;

ProfileOptions DefaultProfile() {
  ProfileOptions p;
  p.seasons = {kMicrosPerDay, 7 * kMicrosPerDay};
  p.arl0 = 5000;
  p.shift = 1.0;
  return p;
}

const ProfileDesign& Design() {
  static const ProfileDesign design = [] {
    auto d = ProfileDesign::Make(DefaultProfile());
    EXPECT_TRUE(d.ok()) << d.status().ToString();
    return *d;
  }();
  return design;
}

struct ReplayResult {
  std::vector<SeriesEvent> alerts;  // alerts only
};

ReplayResult Replay(const std::vector<SyntheticReading>& readings) {
  SeriesMonitor monitor(&Design());
  ReplayResult run;
  std::vector<SeriesEvent> events;
  for (const auto& r : readings) {
    events.clear();
    monitor.Observe(r.time, r.value, &events);
    for (const auto& e : events) {
      if (e.type == EventType::kAlert) run.alerts.push_back(e);
    }
  }
  return run;
}

double Median(std::vector<double> v) {
  if (v.empty()) return 1e9;
  std::sort(v.begin(), v.end());
  const size_t n = v.size();
  return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

// Index of the first reading at or after time t.
long long IndexAt(const std::vector<SyntheticReading>& readings, EventTime t) {
  return std::lower_bound(readings.begin(), readings.end(), t,
                          [](const SyntheticReading& r, EventTime x) { return r.time < x; }) -
         readings.begin();
}

TEST(DetectionQualityTest, FiftyThousandInControlReadingsGiveAtMostTwentyAlerts) {
  SyntheticStreamOptions options;
  const auto readings = MakeSyntheticStream(options, 50000, 1);
  const ReplayResult run = Replay(readings);
  std::printf("[figures] in-control: %zu alerts in 50000 readings\n", run.alerts.size());
  for (const auto& a : run.alerts) {
    std::printf("  %s %s at reading %lld\n", std::string(ToString(a.kind)).c_str(),
                std::string(ToString(a.direction)).c_str(), IndexAt(readings, a.detected_at));
  }
  EXPECT_LE(run.alerts.size(), 20u);
}

struct ShiftFigures {
  double recall;
  double median_delay;          // readings from the first shifted reading to detection, inclusive
  double median_change_error;   // |estimated - true| change index, readings
  int false_before = 0;         // alerts before the change
};

ShiftFigures MeasureLevelShift(double shift_sd, int trials) {
  ShiftFigures f{};
  std::vector<double> delays, errors;
  int detected = 0;
  for (int trial = 0; trial < trials; ++trial) {
    SyntheticStreamOptions options;
    options.change_index = 3200 + 7 * trial;  // about three weeks of history
    options.level_shift = (trial % 2 ? 1 : -1) * shift_sd;
    const auto readings = MakeSyntheticStream(options, options.change_index + 400,
                                              1000 + static_cast<std::uint64_t>(trial));
    const ReplayResult run = Replay(readings);
    const EventTime change_time = readings[options.change_index].time;
    const Direction expected = options.level_shift > 0 ? Direction::kUp : Direction::kDown;
    for (const auto& a : run.alerts) {
      if (a.detected_at < change_time) {
        ++f.false_before;
        continue;
      }
      if (a.kind != AlertKind::kLevel || a.direction != expected) continue;
      ++detected;
      delays.push_back(static_cast<double>(IndexAt(readings, a.detected_at) -
                                           options.change_index + 1));
      errors.push_back(std::abs(static_cast<double>(IndexAt(readings, a.change_at) -
                                                    options.change_index)));
      break;
    }
  }
  f.recall = static_cast<double>(detected) / trials;
  f.median_delay = Median(delays);
  f.median_change_error = Median(errors);
  std::printf("[figures] level shift %.0f sd: recall %.2f, median delay %.1f readings, "
              "median change_at error %.1f readings, %d alerts before the change\n",
              shift_sd, f.recall, f.median_delay, f.median_change_error, f.false_before);
  return f;
}

TEST(DetectionQualityTest, OneSigmaShiftDetectedInNinetyFivePercentOfTrials) {
  EXPECT_GE(MeasureLevelShift(1.0, 100).recall, 0.95);
}

TEST(DetectionQualityTest, TwoSigmaShiftDetectedFastWithAccurateChangeTime) {
  const ShiftFigures f = MeasureLevelShift(2.0, 100);
  EXPECT_GE(f.recall, 0.95);
  EXPECT_LE(f.median_delay, 10.0);
  EXPECT_LE(f.median_change_error, 3.0);
}

TEST(DetectionQualityTest, ThreeSigmaShiftDetectedInNinetyFivePercentOfTrials) {
  EXPECT_GE(MeasureLevelShift(3.0, 100).recall, 0.95);
}

TEST(DetectionQualityTest, VarianceDoublingDetectedInNinetyPercentOfTrials) {
  int detected = 0, wrong_kind = 0;
  std::vector<double> delays;
  for (int trial = 0; trial < 100; ++trial) {
    SyntheticStreamOptions options;
    options.change_index = 3200 + 7 * trial;
    options.sd_ratio = std::sqrt(2.0);  // variance x 2
    const auto readings = MakeSyntheticStream(options, options.change_index + 1500,
                                              5000 + static_cast<std::uint64_t>(trial));
    const ReplayResult run = Replay(readings);
    const EventTime change_time = readings[options.change_index].time;
    for (const auto& a : run.alerts) {
      if (a.detected_at < change_time) continue;
      if (a.kind == AlertKind::kVariance && a.direction == Direction::kUp) {
        ++detected;
        delays.push_back(static_cast<double>(IndexAt(readings, a.detected_at) -
                                             options.change_index + 1));
        break;
      }
      ++wrong_kind;
    }
  }
  std::printf("[figures] variance x2: recall %.2f, median delay %.1f readings, "
              "%d other alerts after the change\n",
              detected / 100.0, Median(delays), wrong_kind);
  EXPECT_GE(detected, 90);
}

TEST(DetectionQualityTest, StoppedStreamRaisesSilenceWithinSilenceAfterPlusOneInterval) {
  ProfileOptions profile = DefaultProfile();
  profile.silence_after = 30 * kMicrosPerMinute;
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok());
  SeriesMonitor monitor(&*design);
  SyntheticStreamOptions options;
  options.gap_probability = 0;
  options.stop_index = 500;
  const auto readings = MakeSyntheticStream(options, 1000, 77);
  std::vector<SeriesEvent> events;
  for (const auto& r : readings) monitor.Observe(r.time, r.value, &events);
  const EventTime last = readings.back().time;
  // The clock advances one reading interval at a time, as other series' readings would.
  std::vector<SeriesEvent> silence;
  EventTime now = last;
  while (silence.empty() && now < last + 10 * kMicrosPerHour) {
    now += options.spacing;
    monitor.AdvanceClock(now, &silence);
  }
  ASSERT_EQ(silence.size(), 1u);
  EXPECT_EQ(silence[0].kind, AlertKind::kSilence);
  EXPECT_EQ(silence[0].change_at, last);
  EXPECT_LE(silence[0].detected_at, last + *profile.silence_after + options.spacing);
  EXPECT_LE(now, last + *profile.silence_after + options.spacing);
  // The next reading resumes the stream.
  std::vector<SeriesEvent> resumed;
  monitor.Observe(now + options.spacing, 20.0, &resumed);
  ASSERT_FALSE(resumed.empty());
  EXPECT_EQ(resumed[0].type, EventType::kResume);
}

}  // namespace
}  // namespace plumbline
