// CalibrationHealth's figures on streams whose behaviour is known, and the
// opt-in threshold re-fit (adapt_thresholds) on a series monitor. Invented
// data; expectations from the distributions' own moments (common practice,
// no source).
#include "detectors/calibration_health.h"

#include <gtest/gtest.h>

#include <bit>
#include <cmath>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "detectors/random.h"
#include "detectors/series_monitor.h"
#include "tests/support/noise_streams.h"

namespace plumbline {
namespace {

TEST(CalibrationHealthTest, IndependentNormalResidualsLookAsAssumed) {
  CalibrationHealth health;
  EXPECT_TRUE(std::isnan(health.variance()));
  Random random(1);
  for (int i = 0; i < 50000; ++i) health.Add(random.Normal());
  // About 2000 effective readings: sd of the variance estimate about 0.03.
  EXPECT_NEAR(health.variance(), 1.0, 0.12);
  EXPECT_NEAR(health.lag1(), 0.0, 0.08);
  EXPECT_LT(health.tail_share(), 0.01);
  EXPECT_NEAR(health.drift_ratio(), 1.0, 0.25);
  EXPECT_EQ(health.count(), 50000);
}

TEST(CalibrationHealthTest, CorrelatedAndHeavyTailedResidualsShowIt) {
  CalibrationHealth correlated, heavy;
  Random random(2);
  double ar = 0.0;
  for (int i = 0; i < 50000; ++i) {
    ar = 0.5 * ar + std::sqrt(0.75) * random.Normal();  // unit variance, lag one 0.5
    correlated.Add(ar);
    // Cauchy: half of all readings beyond |z| = 1, 20% beyond 3.
    heavy.Add(std::tan(3.14159265358979 * (random.Uniform() - 0.5)));
  }
  EXPECT_NEAR(correlated.lag1(), 0.5, 0.08);
  EXPECT_NEAR(correlated.drift_ratio(), 3.0, 0.6);  // (1 + 0.5) / (1 - 0.5)
  EXPECT_NEAR(heavy.tail_share(), 0.205, 0.05);     // 1 - (2/pi) atan(3)
  EXPECT_GT(heavy.variance(), 2.0);
}

TEST(CalibrationHealthTest, SavedHealthContinuesAndForgedHealthIsRefused) {
  CalibrationHealth health;
  Random random(3);
  for (int i = 0; i < 3000; ++i) health.Add(random.Normal());
  SnapshotWriter w;
  health.Save(w);
  const std::string bytes = w.Take();
  CalibrationHealth restored;
  SnapshotReader r(bytes);
  ASSERT_TRUE(restored.Load(r).ok()) << r.status().ToString();
  EXPECT_TRUE(r.AtEnd());
  health.Add(0.5);
  restored.Add(0.5);
  EXPECT_EQ(health.variance(), restored.variance());
  EXPECT_EQ(health.lag1(), restored.lag1());
  // Tag, then weight (field 0), lag weight, squares, products, tail, previous, count.
  auto forged = [&](int field, double value) {
    std::string copy = bytes;
    const std::uint64_t b = std::bit_cast<std::uint64_t>(value);
    for (int i = 0; i < 8; ++i) copy[4 + 8 * field + i] = static_cast<char>(b >> (8 * i));
    CalibrationHealth loaded;
    SnapshotReader reader(copy);
    return loaded.Load(reader);
  };
  EXPECT_FALSE(forged(0, 1e9).ok());   // more weight than the memory allows
  EXPECT_FALSE(forged(2, -1.0).ok());  // negative squares
  EXPECT_FALSE(forged(3, std::numeric_limits<double>::quiet_NaN()).ok());
  EXPECT_FALSE(forged(5, 100.0).ok());  // a previous value beyond the clip
}

using noise_streams::Noise;

// Runs a monitor on a null stream; returns it for inspection.
void RunNull(SeriesMonitor& monitor, Noise noise, int readings, std::uint64_t seed) {
  noise_streams::NoiseSource source(noise, seed);
  EventTime t = noise_streams::kStart;
  std::vector<SeriesEvent> events;
  for (int i = 0; i < readings; ++i) {
    t = noise_streams::NextTime(source, t);
    events.clear();
    monitor.Observe(t, source.Next(noise_streams::Mean(noise, t)), &events);
  }
}

TEST(CalibrationHealthTest, MonitorsReportWhitenedResidualsAsCloseToTheAssumption) {
  for (Noise noise : {Noise::kGaussian, Noise::kAutoregressive}) {
    SCOPED_TRACE(noise_streams::Name(noise));
    auto design = ProfileDesign::Make(noise_streams::ProfileFor(noise));
    ASSERT_TRUE(design.ok());
    SeriesMonitor monitor(&*design);
    RunNull(monitor, noise, 20000, 7);
    ASSERT_GT(monitor.health().count(), 10000);
    // Whitening leaves the AR(1) stream's residuals nearly independent.
    EXPECT_NEAR(monitor.health().lag1(), 0.0, 0.1);
    EXPECT_NEAR(monitor.health().drift_ratio(), 1.0, 0.3);
    EXPECT_NEAR(monitor.residual_autocorrelation(),
                noise == Noise::kAutoregressive ? 0.5 : 0.0, 0.15);
  }
}

// Health is of what the level detectors read. On a count series expecting a
// few events a reading (Poisson, mean 1 to 3), that is each reading's quantile
// residual rather than its standardised residual: the monitor's health equals
// one fed every armed reading's last_z(), which is the detectors' input.
TEST(CalibrationHealthTest, CountSeriesHealthIsOfTheQuantileResidualsTheDetectorsRead) {
  struct Recorder : ObservationListener {
    CalibrationHealth health;
    void Observed(const SeriesMonitor& monitor, EventTime, EventTime, double) override {
      if (monitor.armed()) health.Add(monitor.last_z());
    }
  } recorder;
  auto design = ProfileDesign::Make(noise_streams::ProfileFor(Noise::kPoisson));
  ASSERT_TRUE(design.ok());
  SeriesMonitor monitor(&*design);
  monitor.SetObservationListener(&recorder);
  RunNull(monitor, Noise::kPoisson, 6000, 5);
  ASSERT_GT(monitor.health().count(), 4000);
  EXPECT_EQ(monitor.health().count(), recorder.health.count());
  EXPECT_DOUBLE_EQ(monitor.health().variance(), recorder.health.variance());
  EXPECT_DOUBLE_EQ(monitor.health().lag1(), recorder.health.lag1());
  EXPECT_DOUBLE_EQ(monitor.health().tail_share(), recorder.health.tail_share());
}

TEST(CalibrationHealthTest, AdaptThresholdsRaisesTheCusumOnlyWhereResidualsMisbehave) {
  for (Noise noise : {Noise::kGaussian, Noise::kStudentT}) {
    SCOPED_TRACE(noise_streams::Name(noise));
    ProfileOptions profile = noise_streams::ProfileFor(noise);
    profile.adapt_thresholds = true;
    auto design = ProfileDesign::Make(profile);
    ASSERT_TRUE(design.ok());
    SeriesMonitor monitor(&*design);
    EXPECT_EQ(monitor.adapted_threshold(), 0.0);
    RunNull(monitor, noise, 4000, 11);
    const double designed = design->level.cusum.h;
    ASSERT_GT(monitor.adapted_threshold(), 0.0);
    EXPECT_GE(monitor.adapted_threshold(), designed);
    EXPECT_LE(monitor.adapted_threshold(), 3.0 * designed);
    // Normal residuals keep the design, or grow it by no more than the
    // sampling noise of a 1000-reading variance and block-variance estimate.
    if (noise == Noise::kGaussian) {
      EXPECT_LE(monitor.adapted_threshold(), 1.35 * designed);
    }
    // The re-fitted threshold survives a checkpoint.
    SnapshotWriter w;
    monitor.Save(w);
    const std::string bytes = w.Take();
    SeriesMonitor restored(&*design);
    SnapshotReader r(bytes);
    ASSERT_TRUE(restored.Load(r).ok()) << r.status().ToString();
    EXPECT_EQ(restored.adapted_threshold(), monitor.adapted_threshold());
  }
}

// The re-fit sample spans the profile's period in observations: for a series
// bucketed by the hour, a week is 168 buckets, so the sample is the minimum
// 1000 buckets, however close together the raw readings come (events about
// 30 s apart; counted by their gaps, a week would be 20,160 and the sample
// would wait for the 4000 cap).
TEST(CalibrationHealthTest, BucketedSeriesReFitAfterAThousandBucketsNotAThousandGaps) {
  ProfileOptions profile;
  profile.kind = SeriesKind::kCount;
  profile.every = kMicrosPerHour;
  profile.seasons = {kMicrosPerDay, 7 * kMicrosPerDay};
  profile.warmup = 48;
  profile.arl0 = 5000;
  profile.adapt_thresholds = true;
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok()) << design.status().ToString();
  SeriesMonitor monitor(&*design);
  Random random(3);
  std::vector<SeriesEvent> events;
  const EventTime end = noise_streams::kStart + (48 + 1200) * kMicrosPerHour;
  for (EventTime t = noise_streams::kStart; t < end;) {
    t += static_cast<EventTime>(-std::log(random.UniformOpen()) * 30.0 * kMicrosPerSecond) + 1;
    events.clear();
    monitor.Observe(t, 1.0, &events);
  }
  EXPECT_FALSE(monitor.count_chart());  // about 120 a bucket: the normal CUSUM
  EXPECT_GT(monitor.adapted_threshold(), 0.0);
}

}  // namespace
}  // namespace plumbline
