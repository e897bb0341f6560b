// The false-alarm promise on residuals that are not textbook: autocorrelated,
// heavy-tailed and low counts. Seeded null streams of 200,000 readings on a
// daily season with jittered timestamps, at arl0 = 5000: the observed alert rate
// after warmup must stay within 1.5 x 1/arl0 (the product's promise; common
// practice, no source). Delays are in step_delay_test.cc. Invented data.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <numbers>
#include <vector>

#include <gtest/gtest.h>

#include "detectors/series_monitor.h"
#include "tests/support/noise_streams.h"

namespace plumbline {
namespace {

using namespace noise_streams;

double AlertRateTimesArl0(Noise noise) {
  auto design = ProfileDesign::Make(ProfileFor(noise));
  EXPECT_TRUE(design.ok());
  SeriesMonitor monitor(&*design);
  NoiseSource source(noise, 101);
  constexpr int kReadings = 200000;
  const int kWarmup = design->profile.warmup;
  EventTime t = kStart;
  std::vector<SeriesEvent> events;
  long long alerts = 0;
  for (int i = 0; i < kReadings; ++i) {
    t = NextTime(source, t);
    events.clear();
    monitor.Observe(t, source.Next(Mean(noise, t)), &events);
    if (i < kWarmup) continue;
    for (const SeriesEvent& e : events) alerts += e.type == EventType::kAlert;
  }
  const double rate = static_cast<double>(alerts) * 5000.0 / (kReadings - kWarmup);
  std::printf("[figures] %s: %lld alerts in %d readings = %.2f / arl0; residual "
              "autocorrelation %.2f\n",
              Name(noise), alerts, kReadings - kWarmup, rate,
              monitor.residual_autocorrelation());
  return rate;
}

TEST(FalseAlarmTest, GaussianNoiseKeepsTheFalseAlarmPromise) {
  EXPECT_LE(AlertRateTimesArl0(Noise::kGaussian), 1.5);
}

TEST(FalseAlarmTest, AutocorrelatedResidualsKeepTheFalseAlarmPromise) {
  EXPECT_LE(AlertRateTimesArl0(Noise::kAutoregressive), 1.5);
}

TEST(FalseAlarmTest, HeavyTailedResidualsKeepTheFalseAlarmPromise) {
  EXPECT_LE(AlertRateTimesArl0(Noise::kStudentT), 1.5);
}

TEST(FalseAlarmTest, LowCountsKeepTheFalseAlarmPromise) {
  EXPECT_LE(AlertRateTimesArl0(Noise::kPoisson), 1.5);
}

// Within the default warmup (48 readings, 8 hours here) the model has seen
// less than a day of its daily season and its forecasts can be far off. The
// detectors used to arm there anyway: the early forecast errors raised false
// alerts (114 level alerts in these streams' first 1500 readings), and the
// robust fit, clipping readings toward such a forecast, kept the model from
// being corrected: in 2 of the 100 streams the forecast of counts between 0
// and 5 ran off to -140,000 and the series alerted every cooldown from then
// on. Now the detectors wait until the model knows its coefficients (x' P x
// < 1): every level alert's forecast stays near the counts, and alerts are
// rare (10).
TEST(FalseAlarmTest, AnUnsettledModelIsNotClippedIntoDivergence) {
  auto design = ProfileDesign::Make(ProfileFor(Noise::kPoisson));
  ASSERT_TRUE(design.ok());
  int alerts = 0;
  for (std::uint64_t seed = 1000; seed < 1100; ++seed) {
    SeriesMonitor monitor(&*design);
    NoiseSource source(Noise::kPoisson, seed);
    EventTime t = kStart;
    std::vector<SeriesEvent> events;
    for (int i = 0; i < 1500; ++i) {
      t = NextTime(source, t);
      events.clear();
      monitor.Observe(t, source.Next(Mean(Noise::kPoisson, t)), &events);
      for (const SeriesEvent& e : events) {
        if (e.type != EventType::kAlert || e.kind != AlertKind::kLevel) continue;
        ++alerts;
        EXPECT_GT(e.before, -10.0) << "seed " << seed << ", reading " << i;
        EXPECT_LT(e.before, 20.0) << "seed " << seed << ", reading " << i;
      }
    }
  }
  std::printf(
      "[figures] Poisson mean 2, first 1500 readings of 100 streams: %d level alerts\n",
      alerts);
  EXPECT_LT(alerts, 40);
}

}  // namespace
}  // namespace plumbline
