#include "detectors/arrival_model.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "detectors/random.h"
#include "detectors/snapshot.h"

namespace plumbline {
namespace {

constexpr EventTime kStart = EventTime{1'772'323'200} * kMicrosPerSecond;
constexpr double kMeanGap = 60.0 * kMicrosPerSecond;  // one reading a minute on average

ArrivalModelOptions CalibratedOrDie(double arl0) {
  StatusOr<ArrivalModelOptions> options = ArrivalModelOptions::Calibrated(arl0);
  EXPECT_TRUE(options.ok()) << options.status().ToString();
  return options.ok() ? *options : ArrivalModelOptions{};
}

// ---------------------------------------------------------------------------
// Options

// Common practice, no source: each rule names its option and its range.
TEST(ArrivalModelOptionsTest, IsValidNamesTheOptionAndItsRange) {
  std::string why;
  EXPECT_TRUE(ArrivalModelOptions{}.IsValid(&why));
  ArrivalModelOptions options;
  options.warmup = 2;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("warmup must be in [3, 1000000]"), std::string::npos) << why;
  options = ArrivalModelOptions{};
  options.window = 5;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("window must be in [10, 10000000]"), std::string::npos) << why;
  options = ArrivalModelOptions{};
  options.faster_h = 0.0;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("decision intervals must be > 0"), std::string::npos) << why;
  options = ArrivalModelOptions{};
  options.gap_cap = 1.0;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("gap_cap must be > 2 ln 2"), std::string::npos) << why;
  EXPECT_TRUE(CalibratedOrDie(500).IsValid(&why)) << why;
  EXPECT_FALSE(ArrivalModelOptions::Calibrated(0.5).ok());
  EXPECT_FALSE(ArrivalModelOptions::Calibrated(std::nan("")).ok());
}

// A larger ARL0 needs larger decision intervals (monotone chain; no source).
TEST(ArrivalModelOptionsTest, CalibratedIntervalsGrowWithArl0) {
  const ArrivalModelOptions a = CalibratedOrDie(500), b = CalibratedOrDie(5000);
  EXPECT_GT(b.slower_h, a.slower_h);
  EXPECT_GT(b.faster_h, a.faster_h);
}

// ---------------------------------------------------------------------------
// In control (seeded Monte Carlo; the design is the Brook-Evans chain of
// run_length_chain.h, checked against REFERENCES.md 7.2).

// Regression test: with the baseline learned from the 20 warmup gaps and then
// frozen during every excursion, the in-control ARL was 234 for a design of 500.
// Now: 2000 runs from a fresh model (default warmup 20) on a Poisson stream,
// the mean number of armed gaps to the first alarm is within 10% of 500
// (standard error ~2.2%; measured 497.6), and the two sides share the alarms.
TEST(ArrivalModelTest, PoissonInControlRunLengthMatchesCalibratedArl0) {
  const ArrivalModelOptions options = CalibratedOrDie(500);
  Random random(1);
  constexpr int kRuns = 2000;
  double total = 0.0;
  int slower = 0;
  for (int run = 0; run < kRuns; ++run) {
    ArrivalModel model(options);
    EventTime t = kStart;
    long long armed = 0;
    for (;;) {
      t += static_cast<EventTime>(random.Exponential(kMeanGap));
      const Alarm alarm = model.Observe(t);
      if (model.armed()) ++armed;
      if (alarm.fired) {
        if (alarm.direction == Direction::kDown) ++slower;
        break;
      }
    }
    total += static_cast<double>(armed);
  }
  const double arl = total / kRuns;
  EXPECT_NEAR(arl, 500.0, 50.0);
  EXPECT_NEAR(static_cast<double>(slower) / kRuns, 0.5, 0.05);
  std::printf(
      "Poisson in control, design ARL0 500: measured %.1f (%d runs; %.1f%% "
      "slower-side)\n",
      arl, kRuns, 100.0 * slower / kRuns);
}

// A sensor every minute with +-10 s jitter: X stays in [0.67, 1.33] (after
// the self-starting transform, about the same), so neither CUSUM can drift
// up (header: conservative for regular streams). One million readings, no alarm.
TEST(ArrivalModelTest, RegularJitteredArrivalsNeverAlarmOverAMillionReadings) {
  ArrivalModel model(CalibratedOrDie(500));
  Random random(2);
  int alarms = 0;
  double largest = 0.0;
  for (long long i = 0; i < 1'000'000; ++i) {
    const EventTime jitter =
        static_cast<EventTime>((random.Uniform() - 0.5) * 20.0 * kMicrosPerSecond);
    if (model.Observe(kStart + i * kMicrosPerMinute + jitter).fired) ++alarms;
    largest = std::max({largest, model.slower_statistic(), model.faster_statistic()});
  }
  EXPECT_EQ(alarms, 0);
  EXPECT_NEAR(model.mean_gap(), 60.0 * kMicrosPerSecond, 0.01 * 60.0 * kMicrosPerSecond);
  std::printf("regular arrivals: largest CUSUM statistic %.3f over 1e6 readings\n",
              largest);
}

// One long gap is a silence, not a rate change: capped at gap_cap mean gaps it
// cannot fire the slower side (h > cap - 2 ln 2), and it moves the baseline by
// at most (cap - 1) / window of itself (header).
TEST(ArrivalModelTest, OneLongGapNeitherFiresNorDragsTheBaseline) {
  const ArrivalModelOptions options = CalibratedOrDie(500);
  ASSERT_GT(options.slower_h, options.gap_cap - 2.0 * std::log(2.0));
  ArrivalModel model(options);
  EventTime t = kStart;
  for (int i = 0; i < 5000; ++i) model.Observe(t += kMicrosPerMinute);
  const double before = model.mean_gap();
  EXPECT_FALSE(model.Observe(t += 1000 * kMicrosPerMinute).fired);
  EXPECT_LE(model.mean_gap() / before - 1.0,
            (options.gap_cap - 1.0) / options.window + 1e-12);
  for (int i = 0; i < 100; ++i) EXPECT_FALSE(model.Observe(t += kMicrosPerMinute).fired);
}

// ---------------------------------------------------------------------------
// Changes of rate (seeded; common practice, no source). Design ARL0 5000; the
// change comes after 1000 in-control gaps (a false alarm before it, ~18% of
// runs, is handled as the monitor does: Rebaseline and go on). Of 200 runs
// each, at least 90% detect within 300 gaps of the change, in the right
// direction, with change_at within 40 old mean gaps of the true change in at
// least 75% of detections (the last-zero estimate of Page's CUSUM is noisy for
// a factor-2 change). Measured figures are printed.

struct ChangeResult {
  int detected = 0, right_direction = 0, change_at_close = 0;
  std::vector<double> delays;
};

ChangeResult RunRateChange(double gap_factor, Direction expected, std::uint64_t seed) {
  const ArrivalModelOptions options = CalibratedOrDie(5000);
  Random random(seed);
  ChangeResult result;
  for (int run = 0; run < 200; ++run) {
    ArrivalModel model(options);
    EventTime t = kStart;
    for (int i = 0; i < 1000; ++i) {
      t += static_cast<EventTime>(random.Exponential(kMeanGap));
      if (model.Observe(t).fired) model.Rebaseline();
    }
    const EventTime change = t;
    for (int i = 1; i <= 300; ++i) {
      t += static_cast<EventTime>(random.Exponential(kMeanGap * gap_factor));
      const Alarm alarm = model.Observe(t);
      if (!alarm.fired) continue;
      ++result.detected;
      result.delays.push_back(i);
      if (alarm.direction == expected) ++result.right_direction;
      const double error =
          std::abs(static_cast<double>(alarm.change_at - change)) / kMeanGap;
      if (error <= 40.0) ++result.change_at_close;
      break;
    }
  }
  return result;
}

double Median(std::vector<double> v) {
  if (v.empty()) return 0.0;
  std::sort(v.begin(), v.end());
  return v[v.size() / 2];
}

TEST(ArrivalModelTest, RateHalvingIsDetectedAsSlowerArrivals) {
  const ChangeResult r = RunRateChange(2.0, Direction::kDown, 31);
  EXPECT_GE(r.detected, 180);
  EXPECT_GE(r.right_direction, 180);
  EXPECT_GE(r.change_at_close, 0.75 * r.detected);
  std::printf(
      "rate halved: %d/200 detected, %d slower, median delay %.0f gaps, %d with "
      "change_at within 40 gaps\n",
      r.detected, r.right_direction, Median(r.delays), r.change_at_close);
}

TEST(ArrivalModelTest, RateDoublingIsDetectedAsFasterArrivals) {
  const ChangeResult r = RunRateChange(0.5, Direction::kUp, 32);
  EXPECT_GE(r.detected, 180);
  EXPECT_GE(r.right_direction, 180);
  EXPECT_GE(r.change_at_close, 0.75 * r.detected);
  std::printf(
      "rate doubled: %d/200 detected, %d faster, median delay %.0f gaps, %d with "
      "change_at within 40 gaps\n",
      r.detected, r.right_direction, Median(r.delays), r.change_at_close);
}

// ---------------------------------------------------------------------------
// Next-arrival quantiles: t_last + theta (-ln(1 - q)) (exponential quantile
// function; textbook). Formula check, then coverage on a Poisson stream: the
// next gap falls below the q-quantile in a fraction q of 200 000 steps (+-1%).

TEST(ArrivalModelTest, NextArrivalQuantileIsTheExponentialQuantile) {
  ArrivalModel model(ArrivalModelOptions{});
  Random random(4);
  EventTime t = kStart;
  for (int i = 0; i < 3000; ++i)
    model.Observe(t += static_cast<EventTime>(random.Exponential(kMeanGap)));
  for (double q : {0.1, 0.5, 0.9, 0.99}) {
    const double expected =
        static_cast<double>(model.last_arrival()) + model.mean_gap() * -std::log(1.0 - q);
    EXPECT_NEAR(static_cast<double>(model.NextArrivalQuantile(q)), expected, 1.0)
        << "q " << q;
  }
  EXPECT_GT(model.NextArrivalQuantile(0.9), model.NextArrivalQuantile(0.5));
  EXPECT_GE(model.NextArrivalQuantile(0.0),
            model.last_arrival());  // clamped, still finite
  EXPECT_GT(model.NextArrivalQuantile(1.0), model.NextArrivalQuantile(0.99));

  int below_half = 0, below_ninety = 0;
  constexpr int kSteps = 200'000;
  for (int i = 0; i < kSteps; ++i) {
    const EventTime q50 = model.NextArrivalQuantile(0.5),
                    q90 = model.NextArrivalQuantile(0.9);
    t += static_cast<EventTime>(random.Exponential(kMeanGap));
    if (t <= q50) ++below_half;
    if (t <= q90) ++below_ninety;
    if (model.Observe(t).fired) model.Rebaseline();
  }
  EXPECT_NEAR(static_cast<double>(below_half) / kSteps, 0.5, 0.01);
  EXPECT_NEAR(static_cast<double>(below_ninety) / kSteps, 0.9, 0.01);
}

TEST(ArrivalModelTest, RebaselineRelearnsTheMeanGap) {
  ArrivalModel model(ArrivalModelOptions{});
  EventTime t = kStart;
  for (int i = 0; i < 100; ++i) model.Observe(t += kMicrosPerMinute);
  EXPECT_TRUE(model.armed());
  model.Rebaseline();
  EXPECT_FALSE(model.armed());
  EXPECT_EQ(model.mean_gap(), 0.0);
  for (int i = 0; i < 30; ++i) model.Observe(t += 5 * kMicrosPerMinute);
  EXPECT_TRUE(model.armed());
  EXPECT_NEAR(model.mean_gap(), 5.0 * kMicrosPerMinute, 1.0);
}

}  // namespace
}  // namespace plumbline

namespace plumbline {
namespace {

// A weekly shape pooled by hour of the day learns the quiet hours from every
// night (common practice, no source): after eight days of a Poisson stream
// whose rate is 8 an hour by day (06-18) and 0.4 by night, the same every day,
// the night bins' relative intensity is near the truth with pooling and still
// far above it without (there, each night-hour bin of the week has seen one hour).
TEST(ArrivalShapeTest, WeeklyBinsPooledByHourOfDayLearnQuietHoursFromEveryNight) {
  auto rate_at = [](EventTime t) {
    const EventTime hour = (t % kMicrosPerDay) / kMicrosPerHour;
    return hour >= 6 && hour < 18 ? 8.0 : 0.4;  // per hour
  };
  const double mean_rate = (12 * 8.0 + 12 * 0.4) / 24.0;
  const double truth = 0.4 / mean_rate;  // relative intensity of a night hour
  double error_pooled = 0, error_plain = 0;
  for (int fold : {24, 0}) {
    ArrivalShape shape(7 * kMicrosPerDay, 168, 0, fold);
    Random random(31);
    EventTime t = 0, last = 0;
    // Thinning (Lewis & Shedler 1979, "Simulation of nonhomogeneous Poisson
    // processes by thinning"; MEM) at the day rate.
    while (t < 8 * kMicrosPerDay) {
      t += static_cast<EventTime>(
          random.Exponential(static_cast<double>(kMicrosPerHour) / 8.0));
      if (random.Uniform() * 8.0 < rate_at(t)) {
        shape.Record(last, t);
        last = t;
      }
    }
    ASSERT_TRUE(shape.learned());
    // Mean relative error over the 84 night bins of the week.
    double error = 0;
    int bins = 0;
    for (int b = 0; b < 168; ++b) {
      if (rate_at(b * kMicrosPerHour) > 1.0) continue;
      error += std::abs(shape.relative_intensity(b) - truth) / truth;
      ++bins;
    }
    (fold ? error_pooled : error_plain) = error / bins;
  }
  std::printf(
      "[figures] night-hour relative intensity after 8 days: mean relative error "
      "%.2f pooled by hour of day, %.2f without\n",
      error_pooled, error_plain);
  // Measured: 0.77 against 3.05. The shrinkage toward the mean rate (two
  // pseudo-events) still lifts the night a little after only eight nights.
  EXPECT_LT(error_pooled, 1.0);
  EXPECT_LT(error_pooled * 3, error_plain);
}

// The shape's tables are single precision, their weights rescaled before they
// grow past 1e15. A checkpoint written when they were double precision holds
// weights up to 1e100, out of a float's range: loading rescales them to the
// latest weight and moves the anchor to match, so the loaded shape goes on as
// one whose weights never grew (here the same shape, its tables and weight
// multiplied by 1e60 and its anchor moved back 60 decades of forgetting).
TEST(ArrivalShapeTest, TablesSavedWithWeightsPastAFloatLoadRescaled) {
  const EventTime period = 7 * kMicrosPerDay;
  const double memory = 4.0 * static_cast<double>(period);  // the default
  ArrivalShape original(period, 168, 0, 24);
  Random random(7);
  EventTime t = 0, last = 0;
  const auto next = [&] {
    t += static_cast<EventTime>(random.Exponential(static_cast<double>(kMicrosPerHour)));
  };
  while (t < 8 * kMicrosPerDay) {
    next();
    original.Record(last, t);
    last = t;
  }
  ASSERT_TRUE(original.learned());
  SnapshotWriter saved;
  original.Save(saved);
  // The same state as a double-precision table with weights 1e60 times larger.
  const double factor = 1e60;
  SnapshotReader fields(saved.bytes());
  ASSERT_TRUE(fields.Tag("SHAP"));
  std::vector<double> events = fields.DoubleVector(), exposure = fields.DoubleVector();
  const std::vector<double> p = fields.DoubleVector();
  const double exposure_total = fields.F64();
  const std::int64_t anchor = fields.I64();
  const double weight = fields.F64();
  const std::int64_t records = fields.I64();
  const bool refreshed = fields.Bool(), anchored = fields.Bool();
  ASSERT_TRUE(fields.ok());
  for (double& e : events) e *= factor;
  for (double& x : exposure) x *= factor;
  SnapshotWriter legacy;
  legacy.Tag("SHAP");
  legacy.DoubleVector(events);
  legacy.DoubleVector(exposure);
  legacy.DoubleVector(p);
  legacy.F64(exposure_total);
  legacy.I64(anchor - std::llround(memory * std::log(factor)));
  legacy.F64(weight * factor);
  legacy.I64(records);
  legacy.Bool(refreshed);
  legacy.Bool(anchored);
  ArrivalShape loaded(period, 168, 0, 24);
  SnapshotReader reader(legacy.bytes());
  ASSERT_TRUE(loaded.Load(reader).ok()) << reader.status().ToString();
  // Both go on through a further week of arrivals and re-derive their shapes.
  double worst = 0;
  while (t < 15 * kMicrosPerDay) {
    next();
    original.Record(last, t);
    loaded.Record(last, t);
    last = t;
  }
  for (int b = 0; b < 168; ++b) {
    worst = std::max(
        worst,
        std::abs(loaded.relative_intensity(b) / original.relative_intensity(b) - 1.0));
  }
  EXPECT_LT(worst, 1e-5);
  EXPECT_NEAR(
      loaded.Operational(t, t + period / 3) / original.Operational(t, t + period / 3),
      1.0, 1e-6);
}

// Forgetting over many memories rescales the single-precision tables again
// and again (every ln(1e15) = 34.5 memories); the shape stays finite and even
// for arrivals at one steady rate.
TEST(ArrivalShapeTest, ForgettingPastManyMemoriesKeepsTheShapeFinite) {
  ArrivalShape shape(kMicrosPerDay, 24, kMicrosPerHour, 0);  // a memory of one hour
  Random random(11);
  EventTime t = 0, last = 0;
  while (t < 20 * kMicrosPerDay) {  // 480 memories
    t += static_cast<EventTime>(random.Exponential(60.0 * kMicrosPerSecond));
    shape.Record(last, t);
    last = t;
  }
  ASSERT_TRUE(shape.learned());
  double sum = 0;
  for (int b = 0; b < 24; ++b) {
    ASSERT_TRUE(std::isfinite(shape.relative_intensity(b))) << b;
    sum += shape.relative_intensity(b);
  }
  EXPECT_NEAR(sum / 24, 1.0, 1e-5);
  const double hours = shape.Operational(t, t + kMicrosPerHour) / kMicrosPerHour;
  EXPECT_TRUE(std::isfinite(hours) && hours > 0) << hours;
}

}  // namespace
}  // namespace plumbline
