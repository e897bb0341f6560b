#include "detectors/page_hinkley.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <string>
#include <vector>

#include "detectors/cusum.h"
#include "detectors/random.h"

namespace plumbline {
namespace {

constexpr EventTime kStep = kMicrosPerMinute;
EventTime At(int reading) {
  return EventTime{1'700'000'000} * kMicrosPerSecond + reading * kStep;
}

Alarm Feed(PageHinkley& test, double x, int reading) {
  StatusOr<Alarm> result = test.Update(x, At(reading));
  EXPECT_TRUE(result.ok()) << result.status().ToString();
  return result.ok() ? *result : Alarm{};
}

PageHinkleyOptions KnownMean(double delta, double lambda, double mean = 0.0) {
  PageHinkleyOptions options;
  options.delta = delta;
  options.lambda = lambda;
  options.use_running_mean = false;
  options.mean = mean;
  return options;
}

// ---------------------------------------------------------------------------
// Options

// Common practice, no source: each rule names its option and its range.
TEST(PageHinkleyOptionsTest, IsValidNamesTheOptionAndItsRange) {
  std::string why;
  EXPECT_TRUE(PageHinkleyOptions{}.IsValid(&why)) << why;
  EXPECT_TRUE(PageHinkleyOptions{}.IsValid(nullptr));
  struct Case {
    PageHinkleyOptions options;
    const char* message;
  };
  PageHinkleyOptions delta, lambda, alpha_zero, alpha_big, mean, arl0;
  delta.delta = -0.1;
  lambda.lambda = 0.0;
  alpha_zero.alpha = 0.0;
  alpha_big.alpha = 1.5;
  mean.mean = std::numeric_limits<double>::infinity();
  arl0.arl0 = 0.5;
  for (const Case& c :
       {Case{delta, "delta must be finite and >= 0"},
        Case{lambda, "lambda must be finite and > 0"},
        Case{alpha_zero, "alpha must be in (0, 1]"},
        Case{alpha_big, "alpha must be in (0, 1]"},
        Case{mean, "mean must be a finite number"},
        Case{arl0, "arl0 must be 0 (not calibrated) or finite and >= 1"}}) {
    EXPECT_FALSE(c.options.IsValid(&why));
    EXPECT_NE(why.find(c.message), std::string::npos) << why;
    StatusOr<PageHinkley> refused = PageHinkley::Create(c.options);
    ASSERT_FALSE(refused.ok());
    EXPECT_EQ(refused.status().code(), Status::Code::kInvalidArgument);
  }
  PageHinkleyOptions calibrated;
  calibrated.arl0 = 5000;
  StatusOr<PageHinkley> made = PageHinkley::Create(calibrated);
  ASSERT_TRUE(made.ok());
  EXPECT_EQ(made->arl0(), 5000);
  EXPECT_EQ(made->options().lambda, 10.0);
}

// ---------------------------------------------------------------------------
// Unit behaviour

TEST(PageHinkleyTest, RefusesNonFiniteReadingsWithoutTouchingState) {
  PageHinkley test(PageHinkleyOptions{});
  PageHinkley twin(PageHinkleyOptions{});
  const double xs[] = {0.3, -1.2, 2.5, 0.7};
  for (int i = 0; i < 4; ++i) {
    Feed(test, xs[i], i);
    Feed(twin, xs[i], i);
  }
  for (double bad :
       {std::numeric_limits<double>::quiet_NaN(), std::numeric_limits<double>::infinity(),
        -std::numeric_limits<double>::infinity()}) {
    StatusOr<Alarm> refused = test.Update(bad, At(50));
    ASSERT_FALSE(refused.ok());
    EXPECT_EQ(refused.status().code(), Status::Code::kInvalidArgument);
  }
  EXPECT_EQ(test.up_sum(), twin.up_sum());
  EXPECT_EQ(test.up_statistic(), twin.up_statistic());
  EXPECT_EQ(test.down_sum(), twin.down_sum());
  EXPECT_EQ(test.down_statistic(), twin.down_statistic());
  EXPECT_EQ(test.reference_mean(), twin.reference_mean());
  EXPECT_EQ(test.readings_since_restart(), twin.readings_since_restart());
  for (int i = 4; i < 20; ++i) {
    const Alarm a = Feed(test, 1.5, i);
    const Alarm b = Feed(twin, 1.5, i);
    EXPECT_EQ(a.fired, b.fired);
    EXPECT_EQ(a.shift, b.shift);
    EXPECT_EQ(test.up_statistic(), twin.up_statistic());
  }
}

// Worked by hand (common practice, no source; REFERENCES.md 4 formulation with
// the running mean including x_T). delta = 0.5, lambda = 3.
//
//  T  x   S_T  xbar_T  up inc  m_T    M_T    PH+   down inc  n_T    N_T   PH-
//  1  1   1    1       -0.5    -0.5   -0.5   0     -0.5      -0.5   -0.5  0
//  2  -1  0    0       -1.5    -2.0   -2.0   0      0.5       0.0   -0.5  0.5
//  3  0   0    0       -0.5    -2.5   -2.5   0     -0.5      -0.5   -0.5  0
//  4  4   4    1        2.5     0.0   -2.5   2.5   -3.5      -4.0   -4.0  0
//  5  4   8    1.6      1.9     1.9   -2.5   4.4 > 3: up alarm
//     argmin of m is T = 3, so change_at = reading 4; shift =
//     mean(x_4, x_5) - mean(x_1..x_3) = 4 - 0 = 4, input_mean = mean(x_4, x_5)
//     = 4 (from zero). Everything restarts.
//  6  4   4    4       -0.5    -0.5   -0.5   0     -0.5      -0.5   -0.5  0
//  7  0   4    2       -2.5    -3.0   -3.0   0      1.5       1.0   -0.5  1.5
//  8  0   4    4/3     -11/6   -29/6  -29/6  0      5/6      11/6   -0.5  7/3
//  9  0   4    1       -1.5    -19/3  -19/3  0      0.5       7/3   -0.5  17/6
// 10  0   4    0.8     -1.3    -229/30       0      0.3      79/30  -0.5  3.1333 > 3
//     down alarm; argmin of n is T = 6, so change_at = reading 7; shift =
//     mean(x_7..x_10) - mean(x_6) = 0 - 4 = -4, but input_mean = 0: measured
//     from zero, the readings since change_at did not move.
TEST(PageHinkleyTest, WorkedByHandExampleWithRunningMean) {
  PageHinkleyOptions options;
  options.delta = 0.5;
  options.lambda = 3.0;
  PageHinkley test(options);
  constexpr double kTol = 1e-12;
  struct Step {
    double x, xbar, m, min_m, ph_up, n, min_n, ph_down;
  };
  const Step first[] = {
      {1, 1, -0.5, -0.5, 0, -0.5, -0.5, 0},
      {-1, 0, -2.0, -2.0, 0, 0.0, -0.5, 0.5},
      {0, 0, -2.5, -2.5, 0, -0.5, -0.5, 0},
      {4, 1, 0.0, -2.5, 2.5, -4.0, -4.0, 0},
  };
  for (int i = 0; i < 4; ++i) {
    const Step& s = first[i];
    const Alarm alarm = Feed(test, s.x, i + 1);
    EXPECT_FALSE(alarm.fired) << "T = " << i + 1;
    EXPECT_NEAR(test.reference_mean(), s.xbar, kTol) << "T = " << i + 1;
    EXPECT_NEAR(test.up_sum(), s.m, kTol) << "T = " << i + 1;
    EXPECT_NEAR(test.up_minimum(), s.min_m, kTol) << "T = " << i + 1;
    EXPECT_NEAR(test.up_statistic(), s.ph_up, kTol) << "T = " << i + 1;
    EXPECT_NEAR(test.down_sum(), s.n, kTol) << "T = " << i + 1;
    EXPECT_NEAR(test.down_minimum(), s.min_n, kTol) << "T = " << i + 1;
    EXPECT_NEAR(test.down_statistic(), s.ph_down, kTol) << "T = " << i + 1;
    EXPECT_NEAR(alarm.statistic, std::max(s.ph_up, s.ph_down), kTol);
  }
  EXPECT_EQ(test.down_length(), 0);  // PH- returned to 0 at T = 3
  EXPECT_EQ(test.up_start(), At(4));

  const Alarm up = Feed(test, 4, 5);
  ASSERT_TRUE(up.fired);
  EXPECT_EQ(up.direction, Direction::kUp);
  EXPECT_NEAR(up.statistic, 4.4, kTol);
  EXPECT_EQ(up.change_at, At(4));
  EXPECT_NEAR(up.shift, 4.0, kTol);
  EXPECT_NEAR(up.input_mean, 4.0, kTol);
  EXPECT_EQ(test.readings_since_restart(), 0);
  EXPECT_EQ(test.up_statistic(), 0.0);
  EXPECT_EQ(test.up_sum(), 0.0);

  EXPECT_FALSE(Feed(test, 4, 6).fired);
  EXPECT_NEAR(test.reference_mean(), 4.0, kTol);  // the running mean restarted too
  EXPECT_FALSE(Feed(test, 0, 7).fired);
  EXPECT_NEAR(test.down_statistic(), 1.5, kTol);
  EXPECT_FALSE(Feed(test, 0, 8).fired);
  EXPECT_NEAR(test.down_statistic(), 7.0 / 3.0, kTol);
  EXPECT_NEAR(test.up_sum(), -29.0 / 6.0, kTol);
  EXPECT_FALSE(Feed(test, 0, 9).fired);
  EXPECT_NEAR(test.down_statistic(), 17.0 / 6.0, kTol);
  EXPECT_NEAR(test.down_sum(), 7.0 / 3.0, kTol);
  EXPECT_NEAR(test.down_minimum(), -0.5, kTol);
  EXPECT_EQ(test.down_start(), At(7));
  const Alarm down = Feed(test, 0, 10);
  ASSERT_TRUE(down.fired);
  EXPECT_EQ(down.direction, Direction::kDown);
  EXPECT_NEAR(down.statistic, 79.0 / 30.0 + 0.5, kTol);
  EXPECT_EQ(down.change_at, At(7));
  EXPECT_NEAR(down.shift, -4.0, kTol);
  EXPECT_NEAR(down.input_mean, 0.0, kTol);
  EXPECT_EQ(test.alarms(), 2);
}

// REFERENCES.md 4, pitfall 2 (elementary algebra): m_0 = 0 belongs to the
// minimum. With a known mean 0 and delta = 0.25, x_1 = 1 gives m_1 = 0.75,
// M_1 = min(0, 0.75) = 0, PH+_1 = 0.75 (a minimum over t >= 1 would give 0),
// and the excursion starts at the first reading after the origin.
TEST(PageHinkleyTest, MinimumIncludesTheOrigin) {
  PageHinkley test(KnownMean(0.25, 10.0));
  Feed(test, 1.0, 1);
  EXPECT_EQ(test.up_sum(), 0.75);
  EXPECT_EQ(test.up_minimum(), 0.0);
  EXPECT_EQ(test.up_statistic(), 0.75);
  EXPECT_EQ(test.up_start(), At(1));
  EXPECT_EQ(test.up_length(), 1);
}

// REFERENCES.md 4, pitfall 2 (elementary algebra, COMP): with a known mean and
// alpha = 1, PH+_T equals Page's one-sided CUSUM g_T = max(0, g_{T-1} + x_T -
// mu0 - delta) at every step, PH-_T the lower CUSUM, and the alarms, change
// times and shift estimates coincide with the tabular Cusum (k = delta, h =
// lambda, Montgomery's excursion mean).
TEST(PageHinkleyTest, KnownMeanStatisticsEqualOneSidedCusumsStepByStep) {
  for (double mean : {0.0, 1.5}) {
    const double delta = 0.5, lambda = 4.0;
    PageHinkley test(KnownMean(delta, lambda, mean));
    CusumOptions cusum_options;
    cusum_options.k = delta;
    cusum_options.h = lambda;
    Cusum cusum(cusum_options);
    Random random(77);
    double g_up = 0.0, g_down = 0.0;
    int alarms = 0;
    for (int t = 1; t <= 200'000; ++t) {
      // Quiet stretches with occasional shifts, so both sides fire often.
      const double level = (t / 500) % 4 == 1 ? 1.0 : (t / 500) % 4 == 3 ? -1.0 : 0.0;
      const double z = random.Normal() + level;
      const double x = z + mean;
      g_up = std::max(0.0, g_up + (x - mean) - delta);
      g_down = std::max(0.0, g_down - (x - mean) - delta);
      const Alarm ph = Feed(test, x, t);
      StatusOr<Alarm> page = cusum.Update(z, At(t));
      ASSERT_TRUE(page.ok());
      if (ph.fired) {  // the statistic before the restart
        ASSERT_NEAR(ph.statistic, std::max(g_up, g_down), 1e-12) << "t = " << t;
      } else {
        ASSERT_NEAR(test.up_statistic(), g_up, 1e-12) << "t = " << t;
        ASSERT_NEAR(test.down_statistic(), g_down, 1e-12) << "t = " << t;
      }
      const bool cusum_fires = g_up > lambda || g_down > lambda;
      ASSERT_EQ(ph.fired, cusum_fires) << "t = " << t;
      ASSERT_EQ(page->fired, cusum_fires) << "t = " << t;
      if (cusum_fires) {
        ++alarms;
        ASSERT_EQ(ph.direction, g_up > lambda ? Direction::kUp : Direction::kDown);
        ASSERT_EQ(ph.direction, page->direction);
        ASSERT_EQ(ph.change_at, page->change_at) << "t = " << t;
        ASSERT_NEAR(ph.shift, page->shift, 1e-9) << "t = " << t;
        g_up = g_down = 0.0;  // both restart after any alarm
      }
    }
    EXPECT_GT(alarms, 500);  // the comparison covered many alarms of both kinds
  }
}

// REFERENCES.md 4, pitfall 1: with the batch mean of all T readings inside
// every term, m_T = -T * delta whatever the data, and the test never fires.
// The running mean must not collapse like that, and it must see a step.
TEST(PageHinkleyTest, DoesNotCollapseToMinusTDeltaLikeTheBatchMeanForm) {
  PageHinkleyOptions options;  // running mean, delta = 0.25, lambda = 10
  options.lambda = 1e9;        // no alarm: look at the raw cumulative sum
  PageHinkley test(options);
  Random random(3);
  std::vector<double> xs;
  for (int t = 1; t <= 200; ++t) {
    xs.push_back(random.Normal() + (t > 100 ? 2.0 : 0.0));
    Feed(test, xs.back(), t);
  }
  // The batch form for comparison: sum_t (x_t - mean(x_1..x_T) - delta).
  double batch_mean = 0.0;
  for (double x : xs) batch_mean += x / xs.size();
  double batch_m = 0.0;
  for (double x : xs) batch_m += x - batch_mean - options.delta;
  EXPECT_NEAR(batch_m, -200 * options.delta, 1e-9);
  EXPECT_GT(std::abs(test.up_sum() - (-200 * options.delta)), 1.0);
  EXPECT_GT(test.up_statistic(), 10.0);  // the step is visible in PH+

  // With the default threshold the step fires an up alarm.
  PageHinkley detector(PageHinkleyOptions{});
  int fired_at = 0;
  Alarm alarm;
  for (int t = 1; t <= 200 && fired_at == 0; ++t) {
    alarm = Feed(detector, xs[t - 1], t);
    if (alarm.fired) fired_at = t;
  }
  ASSERT_GT(fired_at, 100);
  EXPECT_LE(fired_at, 115);
  EXPECT_EQ(alarm.direction, Direction::kUp);
  EXPECT_LE(alarm.change_at, At(fired_at));
}

// Common practice, no source: on a noise-free step (0 for 100 readings, then 2)
// the cumulative sum falls by delta per reading up to reading 100, so its
// argmin is reading 100 and change_at is reading 101 exactly; the shift
// estimate is mean(x_101..x_T) - mean(x_1..x_100) = 2 - 0.
TEST(PageHinkleyTest, DatesANoiseFreeStepExactly) {
  PageHinkley test(PageHinkleyOptions{});
  Alarm alarm;
  int t = 0;
  while (!alarm.fired && t < 200) {
    ++t;
    alarm = Feed(test, t > 100 ? 2.0 : 0.0, t);
  }
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kUp);
  EXPECT_EQ(alarm.change_at, At(101));
  EXPECT_NEAR(alarm.shift, 2.0, 1e-12);
}

// Common practice, no source. Over 2000 seeded replications of a 2-sigma step
// at reading 101 (after 100 in-control readings), the change-time estimate is
// close to the truth: its median error lies in [-4, +1] readings (before the
// change the cumulative sum drifts down by delta per reading with unit noise,
// so its last minimum is usually at, or a few readings before, the change),
// and the median shift estimate lies within [1.2, 2.4].
TEST(PageHinkleyTest, ChangeTimeEstimateIsCloseToTheTrueChangeOnNoisySteps) {
  Random random(21);
  std::vector<double> errors, shifts;
  for (int rep = 0; rep < 2000; ++rep) {
    PageHinkley test(PageHinkleyOptions{});
    for (int t = 1; t <= 400; ++t) {
      const Alarm alarm = Feed(test, random.Normal() + (t > 100 ? 2.0 : 0.0), t);
      if (alarm.fired && t > 100) {
        errors.push_back(static_cast<double>((alarm.change_at - At(101)) / kStep));
        shifts.push_back(alarm.shift);
        break;
      }
    }
  }
  ASSERT_GT(errors.size(), 1900u);  // almost every step is detected
  std::sort(errors.begin(), errors.end());
  std::sort(shifts.begin(), shifts.end());
  const double median_error = errors[errors.size() / 2];
  const double median_shift = shifts[shifts.size() / 2];
  std::printf(
      "  running-mean PH, 2-sigma step: median change_at error %.0f readings, "
      "median shift estimate %.3f\n",
      median_error, median_shift);
  EXPECT_GE(median_error, -4.0);
  EXPECT_LE(median_error, 1.0);
  EXPECT_GE(median_shift, 1.2);
  EXPECT_LE(median_shift, 2.4);
}

// Worked by hand (no source): forgetting factor alpha = 0.5, known mean 0,
// delta = 0, lambda = 5.
//  T  x    m_T = 0.5 m + x     M_T   PH+   n_T = 0.5 n - x   N_T   PH-
//  1  2    2                   0     2     -2                -2    0
//  2  2    3                   0     3     -3                -3    0
//  3  -4   -2.5                -2.5  0      2.5              -3    5.5 > 5
// Down alarm at T = 3, change_at = reading 3 (n was at its minimum at T = 2),
// shift = -4 - 0 = -4.
TEST(PageHinkleyTest, ForgettingFactorShrinksTheCumulativeSum) {
  PageHinkleyOptions options = KnownMean(0.0, 5.0);
  options.alpha = 0.5;
  PageHinkley test(options);
  Feed(test, 2, 1);
  EXPECT_EQ(test.up_sum(), 2.0);
  EXPECT_EQ(test.up_statistic(), 2.0);
  Feed(test, 2, 2);
  EXPECT_EQ(test.up_sum(), 3.0);
  EXPECT_EQ(test.up_statistic(), 3.0);
  EXPECT_EQ(test.down_sum(), -3.0);
  const Alarm alarm = Feed(test, -4, 3);
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kDown);
  EXPECT_EQ(alarm.statistic, 5.5);
  EXPECT_EQ(alarm.change_at, At(3));
  EXPECT_EQ(alarm.shift, -4.0);
}

// Common practice, no source: the running-mean form needs no in-control mean,
// so adding a constant to every reading changes nothing.
TEST(PageHinkleyTest, RunningMeanFormIsInvariantToTheLevel) {
  PageHinkley base(PageHinkleyOptions{});
  PageHinkley lifted(PageHinkleyOptions{});
  Random random(11);
  int alarms = 0;
  for (int t = 1; t <= 20'000; ++t) {
    const double x = random.Normal() + ((t / 700) % 2 == 1 ? 0.8 : 0.0);
    const Alarm a = Feed(base, x, t);
    const Alarm b = Feed(lifted, x + 100.0, t);
    ASSERT_EQ(a.fired, b.fired) << "t = " << t;
    ASSERT_NEAR(base.up_statistic(), lifted.up_statistic(), 1e-7) << "t = " << t;
    ASSERT_NEAR(base.down_statistic(), lifted.down_statistic(), 1e-7) << "t = " << t;
    if (a.fired) {
      ++alarms;
      EXPECT_EQ(a.change_at, b.change_at);
      EXPECT_NEAR(a.shift, b.shift, 1e-7);
    }
  }
  EXPECT_GT(alarms, 5);
}

TEST(PageHinkleyTest, ResetReturnsToTheStartState) {
  PageHinkley test(KnownMean(0.25, 2.0, 1.0));
  for (int t = 1; t <= 10; ++t) Feed(test, 3.0, t);
  EXPECT_GT(test.alarms(), 0);
  test.Reset();
  EXPECT_EQ(test.up_sum(), 0.0);
  EXPECT_EQ(test.up_statistic(), 0.0);
  EXPECT_EQ(test.down_statistic(), 0.0);
  EXPECT_EQ(test.reference_mean(), 1.0);
  EXPECT_EQ(test.readings_since_restart(), 0);
  EXPECT_EQ(test.alarms(), 0);
}

// Montgomery ch. 9 ARL table (SEEN; REFERENCES.md 1.1) through the exact
// equivalence above: known-mean Page-Hinkley with delta = 1/2, lambda = 4 is
// the two-sided tabular CUSUM with k = 1/2, h = 4: in-control ARL 168
// (COMP 167.684), 8.38 at a 1-sigma shift (COMP 8.383). Seeded Monte Carlo,
// 20,000 runs per cell, within 5% of the published value.
TEST(PageHinkleyTest, KnownMeanArlMatchesTheCusumTable) {
  PageHinkley test(KnownMean(0.5, 4.0));
  struct Row {
    double shift, published;
  };
  std::uint64_t seed = 900;
  for (const Row& row : {Row{0.0, 168}, Row{1.0, 8.38}}) {
    Random random(seed++);
    test.Reset();
    double total = 0.0;
    std::int64_t length = 0;
    int reading = 0;
    for (int runs = 0; runs < 20'000;) {
      ++length;
      if (Feed(test, random.Normal() + row.shift, ++reading).fired) {
        total += static_cast<double>(length);
        length = 0;
        ++runs;
      }
    }
    const double arl = total / 20'000;
    std::printf(
        "  known-mean PH delta 0.5 lambda 4: shift %.1f  MC ARL %.3f  published %g\n",
        row.shift, arl, row.published);
    EXPECT_NEAR(arl, row.published, 0.05 * row.published) << "shift " << row.shift;
  }
}

}  // namespace
}  // namespace plumbline
