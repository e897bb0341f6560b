#include "detectors/ewma.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <string>
#include <vector>

#include "detectors/random.h"

namespace plumbline {
namespace {

constexpr EventTime kStep = kMicrosPerMinute;
EventTime At(int reading) {
  return EventTime{1'700'000'000} * kMicrosPerSecond + reading * kStep;
}

Alarm Feed(Ewma& chart, double x, int reading) {
  StatusOr<Alarm> result = chart.Update(x, At(reading));
  EXPECT_TRUE(result.ok()) << result.status().ToString();
  return result.ok() ? *result : Alarm{};
}

// The limit formula of Roberts (1959) / Montgomery ch. 9 (REFERENCES.md 3),
// written out independently of the implementation.
double ExactLimit(double lambda, double width, int t) {
  return width *
         std::sqrt(lambda / (2.0 - lambda) * (1.0 - std::pow(1.0 - lambda, 2.0 * t)));
}

// ---------------------------------------------------------------------------
// Options

// Common practice, no source: each rule names its option and its range.
TEST(EwmaOptionsTest, IsValidNamesTheOptionAndItsRange) {
  std::string why;
  EXPECT_TRUE(EwmaOptions{}.IsValid(&why)) << why;
  EXPECT_TRUE(EwmaOptions{}.IsValid(nullptr));
  struct Case {
    EwmaOptions options;
    const char* message;
  };
  EwmaOptions zero_lambda, big_lambda, nan_lambda, width, arl0;
  zero_lambda.lambda = 0.0;
  big_lambda.lambda = 1.01;
  nan_lambda.lambda = std::numeric_limits<double>::quiet_NaN();
  width.width = -2.0;
  arl0.arl0 = std::numeric_limits<double>::infinity();
  for (const Case& c :
       {Case{zero_lambda, "lambda must be in (0, 1]"},
        Case{big_lambda, "lambda must be in (0, 1]"},
        Case{nan_lambda, "lambda must be in (0, 1]"},
        Case{width, "width (L) must be finite and > 0"},
        Case{arl0, "arl0 must be 0 (not calibrated) or finite and >= 1"}}) {
    EXPECT_FALSE(c.options.IsValid(&why));
    EXPECT_NE(why.find(c.message), std::string::npos) << why;
    StatusOr<Ewma> refused = Ewma::Create(c.options);
    ASSERT_FALSE(refused.ok());
    EXPECT_EQ(refused.status().code(), Status::Code::kInvalidArgument);
  }
  EwmaOptions shewhart;
  shewhart.lambda = 1.0;  // the upper end of the range is allowed
  shewhart.width = 3.0;
  shewhart.arl0 = 370;
  StatusOr<Ewma> made = Ewma::Create(shewhart);
  ASSERT_TRUE(made.ok());
  EXPECT_EQ(made->arl0(), 370);
  EXPECT_EQ(made->options().width, 3.0);
}

// ---------------------------------------------------------------------------
// Unit behaviour

TEST(EwmaTest, RefusesNonFiniteReadingsWithoutTouchingState) {
  Ewma chart(EwmaOptions{});
  Ewma twin(EwmaOptions{});
  const double xs[] = {0.4, 1.1, -0.3};
  for (int i = 0; i < 3; ++i) {
    Feed(chart, xs[i], i);
    Feed(twin, xs[i], i);
  }
  for (double bad :
       {std::numeric_limits<double>::quiet_NaN(), std::numeric_limits<double>::infinity(),
        -std::numeric_limits<double>::infinity()}) {
    StatusOr<Alarm> refused = chart.Update(bad, At(40));
    ASSERT_FALSE(refused.ok());
    EXPECT_EQ(refused.status().code(), Status::Code::kInvalidArgument);
  }
  EXPECT_EQ(chart.value(), twin.value());
  EXPECT_EQ(chart.limit(), twin.limit());
  EXPECT_EQ(chart.next_limit(), twin.next_limit());
  EXPECT_EQ(chart.readings_since_restart(), twin.readings_since_restart());
  for (int i = 3; i < 40; ++i) {
    const Alarm a = Feed(chart, 1.3, i);
    const Alarm b = Feed(twin, 1.3, i);
    EXPECT_EQ(a.fired, b.fired);
    EXPECT_EQ(chart.value(), twin.value());
    EXPECT_EQ(chart.limit(), twin.limit());
  }
}

// Roberts (1959); Montgomery ch. 9 (REFERENCES.md 3, MEM formula): the exact
// limits at t = 1, 2, 3 are L sqrt(lambda/(2-lambda) (1 - (1-lambda)^(2t))),
// and the fixed limits are L sqrt(lambda/(2-lambda)) from the first reading.
TEST(EwmaTest, ExactLimitsFollowTheTimeVaryingFormulaAndFixedOnesDoNot) {
  for (double lambda : {0.05, 0.1, 0.25, 1.0}) {
    EwmaOptions options;
    options.lambda = lambda;
    options.width = 2.814;
    Ewma exact(options);
    options.exact_limits = false;
    Ewma fixed(options);
    const double asymptotic = 2.814 * std::sqrt(lambda / (2.0 - lambda));
    EXPECT_NEAR(exact.next_limit(), ExactLimit(lambda, 2.814, 1), 1e-12);
    for (int t = 1; t <= 3; ++t) {
      Feed(exact, 0.0, t);
      Feed(fixed, 0.0, t);
      EXPECT_NEAR(exact.limit(), ExactLimit(lambda, 2.814, t), 1e-12)
          << "lambda " << lambda << " t " << t;
      EXPECT_NEAR(fixed.limit(), asymptotic, 1e-12) << "lambda " << lambda << " t " << t;
    }
    if (lambda < 1.0) {
      EXPECT_LT(exact.limit(), asymptotic);
    }
    // At t = 1 the limit is L * lambda: the first reading is judged alone.
    EXPECT_NEAR(ExactLimit(lambda, 2.814, 1), 2.814 * lambda, 1e-12);
    // Long after the start the exact limit reaches the asymptotic one.
    for (int t = 4; t <= 2000; ++t) Feed(exact, 0.0, t);
    EXPECT_NEAR(exact.limit(), asymptotic, 1e-12);
  }
}

// Common practice, no source (change_at and shift rules in ewma.h); the
// arithmetic is written out. lambda = 0.5, L = 1, exact limits:
//   limit_t = sqrt(1/3 (1 - 0.25^t)) = 0.5, 0.5590, 0.5728 for t = 1, 2, 3
//   x:  -0.9    1       1
//   z:  -0.45   0.275   0.6375 > 0.5728 -> up signal at reading 3
// z was last <= 0 at reading 1, so change_at = reading 2 and the shift
// estimate is mean(x_2, x_3) = 1.
TEST(EwmaTest, AlarmReportsDirectionChangeTimeAndShiftThenRestarts) {
  EwmaOptions options;
  options.lambda = 0.5;
  options.width = 1.0;
  Ewma chart(options);
  EXPECT_FALSE(Feed(chart, -0.9, 1).fired);
  EXPECT_NEAR(chart.value(), -0.45, 1e-12);
  EXPECT_NEAR(chart.limit(), 0.5, 1e-12);
  EXPECT_EQ(chart.run_start(), At(1));
  const Alarm quiet = Feed(chart, 1.0, 2);
  EXPECT_FALSE(quiet.fired);
  EXPECT_EQ(quiet.direction, Direction::kNone);
  EXPECT_NEAR(quiet.statistic, 0.275, 1e-12);
  EXPECT_EQ(chart.run_start(), At(2));
  EXPECT_EQ(chart.run_length(), 1);
  const Alarm alarm = Feed(chart, 1.0, 3);
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kUp);
  EXPECT_NEAR(alarm.statistic, 0.6375, 1e-12);
  EXPECT_EQ(alarm.change_at, At(2));
  EXPECT_NEAR(alarm.shift, 1.0, 1e-12);
  EXPECT_EQ(chart.alarms(), 1);
  // Restart at z = 0 with the time-varying factor started over.
  EXPECT_EQ(chart.value(), 0.0);
  EXPECT_EQ(chart.readings_since_restart(), 0);
  EXPECT_NEAR(chart.next_limit(), 0.5, 1e-12);
  // x = -3: z = -1.5 < -0.5 -> down signal dated at this reading, shift -3.
  const Alarm down = Feed(chart, -3.0, 4);
  ASSERT_TRUE(down.fired);
  EXPECT_EQ(down.direction, Direction::kDown);
  EXPECT_EQ(down.change_at, At(4));
  EXPECT_NEAR(down.shift, -3.0, 1e-12);
}

// Common practice, no source: z exactly at zero ends a run (zero counts as
// "the other side"), so the change time is the first reading after it.
TEST(EwmaTest, ChangeTimeRestartsWhenTheStatisticTouchesZero) {
  EwmaOptions options;
  options.lambda = 0.5;
  options.width = 2.0;
  options.exact_limits = false;  // limit 2 sqrt(1/3) = 1.1547
  Ewma chart(options);
  Feed(chart, 1.0, 1);   // z = 0.5
  Feed(chart, -0.5, 2);  // z = 0
  EXPECT_EQ(chart.value(), 0.0);
  EXPECT_EQ(chart.run_length(), 0);
  Feed(chart, 1.0, 3);                      // z = 0.5
  Feed(chart, 1.5, 4);                      // z = 1.0
  const Alarm alarm = Feed(chart, 2.0, 5);  // z = 1.5 > 1.1547
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.change_at, At(3));
  EXPECT_NEAR(alarm.shift, 1.5, 1e-12);  // mean(1, 1.5, 2)
}

TEST(EwmaTest, ResetReturnsToTheStartState) {
  Ewma chart(EwmaOptions{});
  for (int t = 1; t <= 30; ++t) Feed(chart, 2.5, t);
  EXPECT_GT(chart.alarms(), 0);
  Feed(chart, 0.7, 31);
  chart.Reset();
  EXPECT_EQ(chart.value(), 0.0);
  EXPECT_EQ(chart.limit(), 0.0);  // exact limits: no reading judged yet
  EXPECT_NEAR(chart.next_limit(), ExactLimit(0.1, 2.814, 1), 1e-12);
  EXPECT_EQ(chart.readings_since_restart(), 0);
  EXPECT_EQ(chart.run_length(), 0);
  EXPECT_EQ(chart.alarms(), 0);
}

// ---------------------------------------------------------------------------
// Run lengths by Monte Carlo against published tables.

struct ArlEstimate {
  double mean = 0.0;
  double standard_error = 0.0;
};

// Zero-state run lengths with the shift present from the first reading, from
// one continuous stream: each signal restarts the chart in its start state, so
// successive run lengths are independent copies (this also checks the restart).
ArlEstimate SimulateArl(Ewma& chart, double shift, int runs, std::uint64_t seed) {
  Random random(seed);
  chart.Reset();
  double sum = 0.0, sum_sq = 0.0;
  std::int64_t length = 0;
  int reading = 0;
  for (int done = 0; done < runs;) {
    ++length;
    if (chart.Update(random.Normal() + shift, At(++reading))->fired) {
      const double l = static_cast<double>(length);
      sum += l;
      sum_sq += l * l;
      length = 0;
      ++done;
    }
  }
  const double mean = sum / runs;
  return {mean, std::sqrt((sum_sq - runs * mean * mean) / (runs - 1) / runs)};
}

constexpr int kRuns = 50'000;

struct Design {
  double lambda;
  double width;
  // {shift, published, COMP}
  std::vector<std::vector<double>> rows;
};

// Lucas and Saccucci (1990), as adapted in Montgomery ch. 9, "ARLs for several
// EWMA control schemes" (published values MEM; REFERENCES.md 3.1), with the
// fixed asymptotic limits the tables use. Second value: COMP (Nystrom solution
// of the integral equation, REFERENCES.md 3.1). Each cell: 50,000 seeded runs,
// within 5% of the published value and within 4 standard errors of COMP.
TEST(EwmaArlTest, FixedLimitArlsMatchLucasSaccucciTable) {
  // clang-format off
  const std::vector<Design> designs = {
      {0.10, 2.814, {{0, 500, 499.58}, {0.25, 106, 106.32}, {0.5, 31.3, 31.30},
                     {0.75, 15.9, 15.85}, {1, 10.3, 10.33}, {1.5, 6.1, 6.08},
                     {2, 4.4, 4.36}, {2.5, 3.4, 3.44}, {3, 2.9, 2.87}, {4, 2.2, 2.19}}},
      {0.20, 2.962, {{0, 500, 499.74}, {0.25, 150, 150.22}, {0.5, 41.8, 41.76},
                     {0.75, 18.2, 18.15}, {1, 10.5, 10.54}, {1.5, 5.5, 5.50},
                     {2, 3.7, 3.74}, {2.5, 2.9, 2.88}, {3, 2.4, 2.38}, {4, 1.9, 1.86}}},
      {0.05, 2.615, {{0, 500, 499.93}, {0.5, 28.8, 28.76}, {1, 11.4, 11.38},
                     {2, 5.2, 5.22}}},
      {0.25, 2.998, {{0, 500, 499.84}, {0.5, 48.2, 48.29}, {1, 11.1, 11.14},
                     {2, 3.6, 3.61}}},
      {0.40, 3.054, {{0, 500, 499.95}, {0.5, 71.2, 71.20}, {1, 14.3, 14.26},
                     {2, 3.5, 3.52}}},
  };
  // clang-format on
  std::uint64_t seed = 100;
  for (const Design& design : designs) {
    EwmaOptions options;
    options.lambda = design.lambda;
    options.width = design.width;
    options.exact_limits = false;
    Ewma chart(options);
    for (const std::vector<double>& row : design.rows) {
      const double shift = row[0], published = row[1], computed = row[2];
      const ArlEstimate arl = SimulateArl(chart, shift, kRuns, seed++);
      std::printf(
          "  EWMA lambda %.2f L %.3f shift %.2f: MC %.3f +/- %.3f  published %g"
          "  COMP %g\n",
          design.lambda, design.width, shift, arl.mean, arl.standard_error, published,
          computed);
      EXPECT_NEAR(arl.mean, published, 0.05 * published)
          << "Lucas & Saccucci (1990) via Montgomery ch. 9 (MEM), lambda "
          << design.lambda << " shift " << shift;
      EXPECT_NEAR(arl.mean, computed, 4.0 * arl.standard_error)
          << "REFERENCES.md 3.1 COMP, lambda " << design.lambda << " shift " << shift;
    }
  }
}

// REFERENCES.md 1.5 (closed form, COMP): lambda = 1 is the Shewhart individuals
// chart, ARL = 1 / (Phi(-3 - d) + 1 - Phi(3 - d)): 370.398 at d = 0, 43.895 at
// d = 1. With exact limits the t = 1 limit is L * lambda = L, so the exact and
// fixed charts coincide.
TEST(EwmaArlTest, LambdaOneIsTheShewhartChart) {
  EwmaOptions options;
  options.lambda = 1.0;
  options.width = 3.0;
  Ewma chart(options);
  const ArlEstimate in_control = SimulateArl(chart, 0.0, kRuns, 7);
  const ArlEstimate shifted = SimulateArl(chart, 1.0, kRuns, 8);
  std::printf("  EWMA lambda 1 L 3: MC %.2f +/- %.2f (370.398), %.3f +/- %.3f (43.895)\n",
              in_control.mean, in_control.standard_error, shifted.mean,
              shifted.standard_error);
  EXPECT_NEAR(in_control.mean, 370.398, 4.0 * in_control.standard_error);
  EXPECT_NEAR(shifted.mean, 43.895, 4.0 * shifted.standard_error);
}

}  // namespace
}  // namespace plumbline
