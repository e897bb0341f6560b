// Forecasts on demand (detectors/prediction.h) on seeded synthetic streams whose
// true model is known: a daily and weekly pattern, a trend, and N(0, 1) noise
// (tests/support/synthetic_stream.h). The properties checked are the model's
// own (common practice, no source) unless a source is named.
#include "detectors/prediction.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <vector>

#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

using synthetic::MakeSyntheticStream;
using synthetic::SyntheticReading;
using synthetic::SyntheticStreamOptions;

ProfileDesign Design() {
  ProfileOptions profile;
  profile.seasons = {kMicrosPerDay, 7 * kMicrosPerDay};
  auto design = ProfileDesign::Make(profile);
  EXPECT_TRUE(design.ok()) << design.status().ToString();
  return *design;
}

TEST(NormalQuantileTest, MatchesTheNormalTable) {
  // R 4.2.2's qnorm (a general reference library; printed with digits = 17):
  // qnorm(0.975), qnorm(0.9), qnorm(1e-10).
  EXPECT_NEAR(NormalQuantile(0.975), 1.9599639845400536, 1e-13);
  EXPECT_NEAR(NormalQuantile(0.9), 1.2815515655446008, 1e-13);
  EXPECT_NEAR(NormalQuantile(0.5), 0.0, 1e-15);
  EXPECT_NEAR(NormalQuantile(0.025), -1.9599639845400536, 1e-13);
  EXPECT_NEAR(NormalQuantile(1e-10), -6.3613409024040557, 1e-12);
  EXPECT_TRUE(std::isnan(NormalQuantile(0.0)));
  EXPECT_TRUE(std::isnan(NormalQuantile(1.0)));
}

TEST(ForecastReadingTest, RefusesBeforeTheModelStartsAndForThePast) {
  const ProfileDesign design = Design();
  SeriesMonitor monitor(&design);
  EXPECT_EQ(ForecastReading(monitor, 0).status().code(),
            Status::Code::kFailedPrecondition);
  EXPECT_EQ(ForecastNextReading(monitor).status().code(),
            Status::Code::kFailedPrecondition);
  std::vector<SeriesEvent> events;
  SyntheticStreamOptions options;
  options.gap_probability = 0.0;
  const auto stream = MakeSyntheticStream(options, 500, 7);
  for (const SyntheticReading& r : stream) monitor.Observe(r.time, r.value, &events);
  const EventTime last = stream.back().time;
  EXPECT_EQ(ForecastReading(monitor, last - kMicrosPerHour).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(ForecastReading(monitor, last + kMicrosPerHour, 1.0).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(ForecastNextReading(monitor, {0.5, 1.0}).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_TRUE(ForecastReading(monitor, last + kMicrosPerHour).ok());
}

TEST(ForecastReadingTest, IntervalsOverTheNextDayCoverAtTheirLevel) {
  const ProfileDesign design = Design();
  SyntheticStreamOptions options;
  options.gap_probability = 0.0;
  double covered95 = 0, covered80 = 0, count = 0, sd_sum = 0;
  // Five seeds, each: learn three weeks of 10-minute readings, then forecast
  // every reading of the next day from that origin.
  for (std::uint64_t seed = 1; seed <= 5; ++seed) {
    const auto stream = MakeSyntheticStream(options, 4 * 7 * 144, seed);
    const std::size_t origin = 3 * 7 * 144;
    SeriesMonitor monitor(&design);
    std::vector<SeriesEvent> events;
    for (std::size_t i = 0; i < origin; ++i) {
      monitor.Observe(stream[i].time, stream[i].value, &events);
    }
    for (std::size_t i = origin; i < origin + 144; ++i) {
      const auto wide = ForecastReading(monitor, stream[i].time, 0.95);
      const auto narrow = ForecastReading(monitor, stream[i].time, 0.80);
      ASSERT_TRUE(wide.ok() && narrow.ok()) << wide.status().ToString();
      EXPECT_NEAR(wide->value, narrow->value, 1e-12);
      EXPECT_LT(narrow->high - narrow->low, wide->high - wide->low);
      covered95 += stream[i].value >= wide->low && stream[i].value <= wide->high;
      covered80 += stream[i].value >= narrow->low && stream[i].value <= narrow->high;
      sd_sum += wide->sd;
      ++count;
    }
  }
  std::printf("[figures] next-day coverage: 95%% -> %.3f, 80%% -> %.3f, mean sd %.3f\n",
              covered95 / count, covered80 / count, sd_sum / count);
  // 720 forecasts: binomial standard errors 0.8 and 1.5 points; the bounds
  // allow about three of them plus the model's own estimation error.
  EXPECT_NEAR(covered95 / count, 0.95, 0.04);
  EXPECT_NEAR(covered80 / count, 0.80, 0.06);
  // The noise sd is 1; the predictive sd adds the coefficients' uncertainty.
  EXPECT_GT(sd_sum / count, 0.9);
  EXPECT_LT(sd_sum / count, 1.3);
}

TEST(ForecastReadingTest, UncertaintyGrowsWithTheHorizon) {
  ProfileOptions profile;
  profile.seasons = {kMicrosPerDay};
  profile.level_noise = 0.01;  // a wandering level: its variance grows linearly
  const ProfileDesign design = *ProfileDesign::Make(profile);
  SeriesMonitor monitor(&design);
  SyntheticStreamOptions options;
  options.gap_probability = 0.0;
  options.weekly_amplitude = 0.0;
  const auto stream = MakeSyntheticStream(options, 2000, 3);
  std::vector<SeriesEvent> events;
  for (const SyntheticReading& r : stream) monitor.Observe(r.time, r.value, &events);
  const EventTime last = stream.back().time;
  double previous = 0.0;
  for (EventTime ahead :
       {kMicrosPerHour, kMicrosPerDay, 7 * kMicrosPerDay, 30 * kMicrosPerDay}) {
    const auto f = ForecastReading(monitor, last + ahead);
    ASSERT_TRUE(f.ok());
    EXPECT_GT(f->sd, previous) << ToSeconds(ahead) << " s ahead";
    EXPECT_EQ(f->horizon, last + ahead - monitor.forecaster()->last_time());
    previous = f->sd;
  }
}

TEST(ForecastNextReadingTest, RegularReadingsGiveTheirSpacingAndOrderedQuantiles) {
  const ProfileDesign design = Design();
  SeriesMonitor monitor(&design);
  SyntheticStreamOptions options;
  options.gap_probability = 0.0;
  const auto stream = MakeSyntheticStream(options, 300, 11);
  std::vector<SeriesEvent> events;
  for (const SyntheticReading& r : stream) monitor.Observe(r.time, r.value, &events);
  const auto next = ForecastNextReading(monitor, {0.1, 0.5, 0.9});
  ASSERT_TRUE(next.ok()) << next.status().ToString();
  EXPECT_EQ(next->last, stream.back().time);
  // Ten-minute spacing: the expected next reading one mean gap on (within the
  // jitter), and the exponential model's median at ln 2 mean gaps.
  const double gap = ToSeconds(next->expected - next->last);
  EXPECT_NEAR(gap, 600.0, 30.0);
  ASSERT_EQ(next->quantiles.size(), 3u);
  EXPECT_NEAR(ToSeconds(next->quantiles[1].time - next->last), gap * std::log(2.0), 1.0);
  EXPECT_LT(next->quantiles[0].time, next->quantiles[1].time);
  EXPECT_LT(next->quantiles[1].time, next->quantiles[2].time);
}

}  // namespace
}  // namespace plumbline
