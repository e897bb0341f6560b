// Interim re-fits of the variance and arrival charts (SeriesMonitor::StagedRefit):
// a chart whose first residuals already reach its cap far more often than its
// model allows gets a raised decision interval long before its full re-fit
// sample is in; one whose residuals fit its model keeps its design. Seeded
// synthetic streams (tests/support/noise_streams.h); invented data.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <vector>

#include "detectors/random.h"
#include "detectors/series_monitor.h"
#include "tests/support/noise_streams.h"

namespace plumbline {
namespace {

using namespace noise_streams;

// Whether either side's decision interval differs from its design.
bool Raised(double upper_h, double lower_h, double design_upper, double design_lower) {
  EXPECT_GE(upper_h, design_upper);
  EXPECT_GE(lower_h, design_lower);
  return upper_h != design_upper || lower_h != design_lower;
}

// Readings 0-699 of a stream: past the warmup (48) and the interim re-fits at
// 125, 250 and 500 values, before the full sample of 1,000.
constexpr int kReadings = 700;

int VarianceChartsRaised(Noise noise) {
  auto design = ProfileDesign::Make(ProfileFor(noise));
  EXPECT_TRUE(design.ok());
  int raised = 0;
  for (std::uint64_t seed = 300; seed < 320; ++seed) {
    SeriesMonitor monitor(&*design);
    NoiseSource source(noise, seed);
    EventTime t = kStart;
    std::vector<SeriesEvent> events;
    for (int i = 0; i < kReadings; ++i) {
      t = NextTime(source, t);
      events.clear();
      monitor.Observe(t, source.Next(Mean(noise, t)), &events);
    }
    const VarianceCusumOptions& now = monitor.variance_chart().options();
    raised +=
        Raised(now.up_h, now.down_h, design->variance.up_h, design->variance.down_h);
  }
  return raised;
}

TEST(InterimRefitTest, HeavyTailedResidualsRaiseTheVarianceChartBeforeTheFullSample) {
  // Student-t with 3 d.f.: about 2% of robustly scaled residuals beyond 3.5
  // sigma, against 0.05% for normal ones.
  EXPECT_GE(VarianceChartsRaised(Noise::kStudentT), 18);
}

TEST(InterimRefitTest, NormalResidualsKeepTheVarianceChartsDesign) {
  EXPECT_LE(VarianceChartsRaised(Noise::kGaussian), 2);
}

// Arrivals: exponential gaps (Poisson arrivals, the model) or bursty ones:
// hyperexponential gaps, 90% with mean 8 minutes and 10% with mean 40 (a
// logger that stalls now and then), whose long gaps reach the cap of 6 mean
// gaps about 2% of the time against 0.25% for exponential ones.
int RateChartsRaised(bool bursty) {
  ProfileOptions p = ProfileFor(Noise::kGaussian);
  auto design = ProfileDesign::Make(p);
  EXPECT_TRUE(design.ok());
  int raised = 0;
  for (std::uint64_t seed = 400; seed < 420; ++seed) {
    SeriesMonitor monitor(&*design);
    Random rng(seed);
    EventTime t = kStart;
    std::vector<SeriesEvent> events;
    for (int i = 0; i < kReadings; ++i) {
      const double mean = bursty ? (rng.Uniform() < 0.1 ? 40.0 : 8.0) : 10.0;
      const double minutes = -mean * std::log(1.0 - rng.Uniform());
      t += static_cast<EventTime>(minutes * kMicrosPerMinute) + 1;
      events.clear();
      monitor.Observe(t, Mean(Noise::kGaussian, t) + rng.Normal(), &events);
    }
    const ArrivalModelOptions& now = monitor.arrivals().options();
    raised += Raised(now.slower_h, now.faster_h, design->arrival.slower_h,
                     design->arrival.faster_h);
  }
  return raised;
}

TEST(InterimRefitTest, StallingArrivalsRaiseTheRateChartBeforeTheFullSample) {
  EXPECT_GE(RateChartsRaised(true), 18);
}

TEST(InterimRefitTest, PoissonArrivalsKeepTheRateChartsDesign) {
  EXPECT_LE(RateChartsRaised(false), 2);
}

}  // namespace
}  // namespace plumbline
