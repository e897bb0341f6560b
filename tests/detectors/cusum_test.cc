#include "detectors/cusum.h"

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

constexpr EventTime kStep = kMicrosPerMinute;  // one reading a minute
EventTime At(int reading) {
  return EventTime{1'700'000'000} * kMicrosPerSecond + reading * kStep;
}

Alarm Feed(Cusum& chart, double x, int reading) {
  StatusOr<Alarm> result = chart.Update(x, At(reading));
  EXPECT_TRUE(result.ok()) << result.status().ToString();
  return result.ok() ? *result : Alarm{};
}

// ---------------------------------------------------------------------------
// Options

// Common practice, no source: each rule names its option and its range.
TEST(CusumOptionsTest, IsValidNamesTheOptionAndItsRange) {
  std::string why;
  EXPECT_TRUE(CusumOptions{}.IsValid(&why));
  EXPECT_TRUE(CusumOptions{}.IsValid(nullptr));

  CusumOptions bad_k;
  bad_k.k = 0.0;
  EXPECT_FALSE(bad_k.IsValid(&why));
  EXPECT_NE(why.find("k must be finite and > 0"), std::string::npos) << why;

  CusumOptions bad_h;
  bad_h.h = -1.0;
  EXPECT_FALSE(bad_h.IsValid(&why));
  EXPECT_NE(why.find("h must be finite and > 0"), std::string::npos) << why;

  CusumOptions nan_h;
  nan_h.h = std::numeric_limits<double>::quiet_NaN();
  EXPECT_FALSE(nan_h.IsValid(&why));
  EXPECT_NE(why.find("h must be"), std::string::npos) << why;

  CusumOptions bad_headstart;
  bad_headstart.headstart = 5.0;  // == h
  EXPECT_FALSE(bad_headstart.IsValid(&why));
  EXPECT_NE(why.find("headstart must be in [0, h)"), std::string::npos) << why;
  bad_headstart.headstart = -0.1;
  EXPECT_FALSE(bad_headstart.IsValid(&why));
  EXPECT_NE(why.find("headstart"), std::string::npos) << why;

  CusumOptions bad_arl0;
  bad_arl0.arl0 = -3.0;
  EXPECT_FALSE(bad_arl0.IsValid(&why));
  EXPECT_NE(why.find("arl0 must be 0 (not calibrated) or finite and >= 1"),
            std::string::npos)
      << why;
}

TEST(CusumOptionsTest, CreateRefusesInvalidOptionsAndKeepsValidOnes) {
  CusumOptions bad;
  bad.k = -0.5;
  StatusOr<Cusum> refused = Cusum::Create(bad);
  ASSERT_FALSE(refused.ok());
  EXPECT_EQ(refused.status().code(), Status::Code::kInvalidArgument);
  EXPECT_NE(refused.status().message().find("k must be"), std::string::npos);

  CusumOptions good;
  good.h = 4.774;
  good.arl0 = 370;
  StatusOr<Cusum> chart = Cusum::Create(good);
  ASSERT_TRUE(chart.ok());
  EXPECT_EQ(chart->options().h, 4.774);
  EXPECT_EQ(chart->arl0(), 370);
  EXPECT_EQ(Cusum(CusumOptions{}).arl0(), 0.0);  // 0 = not calibrated
}

// ---------------------------------------------------------------------------
// Unit behaviour on hand-made sequences (common practice, no source; the
// arithmetic is written out beside each check).

TEST(CusumTest, RefusesNonFiniteReadingsWithoutTouchingState) {
  Cusum chart(CusumOptions{});
  Cusum twin(CusumOptions{});
  const std::vector<double> before = {0.8, 1.4, -0.2, 2.0};
  for (int i = 0; i < static_cast<int>(before.size()); ++i) {
    Feed(chart, before[i], i);
    Feed(twin, before[i], i);
  }
  const double upper = chart.upper(), lower = chart.lower();
  for (double bad :
       {std::numeric_limits<double>::quiet_NaN(), std::numeric_limits<double>::infinity(),
        -std::numeric_limits<double>::infinity()}) {
    StatusOr<Alarm> refused = chart.Update(bad, At(99));
    ASSERT_FALSE(refused.ok());
    EXPECT_EQ(refused.status().code(), Status::Code::kInvalidArgument);
  }
  EXPECT_EQ(chart.upper(), upper);
  EXPECT_EQ(chart.lower(), lower);
  EXPECT_EQ(chart.upper_length(), twin.upper_length());
  EXPECT_EQ(chart.upper_start(), twin.upper_start());
  EXPECT_EQ(chart.readings_since_restart(), twin.readings_since_restart());
  // The refused readings leave no trace: the next readings match the twin's.
  for (int i = 4; i < 10; ++i) {
    const Alarm a = Feed(chart, 1.2, i);
    const Alarm b = Feed(twin, 1.2, i);
    EXPECT_EQ(a.fired, b.fired);
    EXPECT_EQ(a.change_at, b.change_at);
    EXPECT_EQ(chart.upper(), twin.upper());
    EXPECT_EQ(chart.lower(), twin.lower());
  }
}

TEST(CusumTest, UpperAlarmReportsDirectionChangeTimeAndExcursionMean) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 2.0;
  Cusum chart(options);
  // x:   0     1     1.5   2
  // C+:  0     0.5   1.5   3.0 > 2  -> signal at reading 3
  // C-:  0     0     0     0
  // The excursion began at reading 1 (C+ was last zero at reading 0), N = 3,
  // shift = k + C+/N = 0.5 + 3/3 = 1.5 = mean(1, 1.5, 2).
  EXPECT_FALSE(Feed(chart, 0.0, 0).fired);
  EXPECT_EQ(chart.upper(), 0.0);
  EXPECT_EQ(chart.upper_length(), 0);
  EXPECT_FALSE(Feed(chart, 1.0, 1).fired);
  EXPECT_EQ(chart.upper(), 0.5);
  EXPECT_EQ(chart.upper_start(), At(1));
  const Alarm quiet = Feed(chart, 1.5, 2);
  EXPECT_FALSE(quiet.fired);
  EXPECT_EQ(quiet.direction, Direction::kNone);
  EXPECT_EQ(quiet.statistic, 1.5);
  const Alarm alarm = Feed(chart, 2.0, 3);
  EXPECT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kUp);
  EXPECT_EQ(alarm.change_at, At(1));
  EXPECT_DOUBLE_EQ(alarm.shift, 1.5);
  EXPECT_DOUBLE_EQ(alarm.statistic, 3.0);
  EXPECT_EQ(chart.alarms(), 1);
}

TEST(CusumTest, LowerAlarmIsTheMirrorWithNegativeShift) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 2.0;
  Cusum chart(options);
  // x:   -1    -1.5  -2     (C- = 0.5, 1.5, 3.0 > 2 at reading 2)
  EXPECT_FALSE(Feed(chart, -1.0, 0).fired);
  EXPECT_FALSE(Feed(chart, -1.5, 1).fired);
  const Alarm alarm = Feed(chart, -2.0, 2);
  EXPECT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kDown);
  EXPECT_EQ(alarm.change_at, At(0));
  EXPECT_DOUBLE_EQ(alarm.shift, -1.5);  // -(0.5 + 3/3) = mean(-1, -1.5, -2)
  EXPECT_DOUBLE_EQ(alarm.input_mean, -1.5);  // a CUSUM measures from zero: the same
}

TEST(CusumTest, ChangeTimeIsTheReadingAfterTheSideWasLastZero) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 3.0;
  Cusum chart(options);
  // x:   2     -2    1     2     2.5
  // C+:  1.5   0     0.5   2.0   4.0 > 3  -> signal at reading 4
  // C+ was last zero at reading 1, so the excursion is readings 2..4, N = 3,
  // shift = 0.5 + 4/3 = mean(1, 2, 2.5) = 11/6.
  const double xs[] = {2, -2, 1, 2};
  for (int i = 0; i < 4; ++i) EXPECT_FALSE(Feed(chart, xs[i], i).fired);
  EXPECT_EQ(chart.upper_length(), 2);  // readings 2 and 3
  EXPECT_EQ(chart.upper_start(), At(2));
  const Alarm alarm = Feed(chart, 2.5, 4);
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.change_at, At(2));
  EXPECT_NEAR(alarm.shift, 11.0 / 6.0, 1e-12);
}

TEST(CusumTest, RestartsFromZeroAfterASignal) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 2.0;
  Cusum chart(options);
  Feed(chart, 3.0, 0);  // C+ = 2.5 > 2: signal, restart
  EXPECT_EQ(chart.alarms(), 1);
  EXPECT_EQ(chart.upper(), 0.0);
  EXPECT_EQ(chart.lower(), 0.0);
  EXPECT_EQ(chart.readings_since_restart(), 0);
  // The next excursion is measured from the restart, not from before it.
  EXPECT_FALSE(Feed(chart, 1.5, 1).fired);  // C+ = 1
  const Alarm alarm = Feed(chart, 2.0, 2);  // C+ = 2.5
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.change_at, At(1));
  EXPECT_DOUBLE_EQ(alarm.shift, 1.75);  // 0.5 + 2.5/2
  EXPECT_EQ(chart.alarms(), 2);
}

// Lucas and Crosier (1982): both sides start, and restart, at the headstart.
TEST(CusumTest, HeadstartStartsAndRestartsBothSidesThere) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 4.0;
  options.headstart = 2.0;
  Cusum chart(options);
  EXPECT_EQ(chart.upper(), 2.0);
  EXPECT_EQ(chart.lower(), 2.0);
  // x = 1.5 three times: C+ = 3, 4, 5 > 4 at reading 2; C- = 0 from reading 0.
  EXPECT_FALSE(Feed(chart, 1.5, 0).fired);
  EXPECT_EQ(chart.upper(), 3.0);
  EXPECT_EQ(chart.lower(), 0.0);
  EXPECT_FALSE(Feed(chart, 1.5, 1).fired);  // C+ = 4, not > 4
  const Alarm alarm = Feed(chart, 1.5, 2);
  ASSERT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kUp);
  // The side never touched zero since the start: the excursion is every
  // reading since the start, and the headstart is taken out of the shift:
  // 0.5 + (5 - 2)/3 = 1.5 = mean(1.5, 1.5, 1.5).
  EXPECT_EQ(alarm.change_at, At(0));
  EXPECT_DOUBLE_EQ(alarm.shift, 1.5);
  EXPECT_EQ(chart.upper(), 2.0);
  EXPECT_EQ(chart.lower(), 2.0);
}

TEST(CusumTest, ResetReturnsToTheStartState) {
  CusumOptions options;
  options.headstart = 1.0;
  Cusum chart(options);
  for (int i = 0; i < 5; ++i) Feed(chart, 3.0, i);
  EXPECT_GT(chart.alarms(), 0);
  chart.Reset();
  EXPECT_EQ(chart.upper(), 1.0);
  EXPECT_EQ(chart.lower(), 1.0);
  EXPECT_EQ(chart.upper_length(), 0);
  EXPECT_EQ(chart.readings_since_restart(), 0);
  EXPECT_EQ(chart.alarms(), 0);
}

// ---------------------------------------------------------------------------
// Run lengths by Monte Carlo against published tables.

struct ArlEstimate {
  double mean = 0.0;
  double standard_error = 0.0;
};

// Zero-state run lengths with the shift present from the first reading. The
// chart is fed one continuous stream: each signal restarts it in its start
// state, so successive run lengths are independent copies (this also checks
// the automatic restart).
template <typename Chart, typename Draw>
ArlEstimate SimulateArl(Chart& chart, int runs, std::uint64_t seed, Draw draw) {
  Random random(seed);
  chart.Reset();
  double sum = 0.0, sum_sq = 0.0;
  std::int64_t length = 0;
  int reading = 0;
  for (int done = 0; done < runs;) {
    ++length;
    StatusOr<Alarm> alarm = chart.Update(draw(random), At(++reading));
    if (alarm->fired) {
      const double l = static_cast<double>(length);
      sum += l;
      sum_sq += l * l;
      length = 0;
      ++done;
    }
  }
  const double mean = sum / runs;
  const double variance = (sum_sq - runs * mean * mean) / (runs - 1);
  return {mean, std::sqrt(variance / runs)};
}

struct ArlRow {
  double shift;
  double published;
  double computed;
};

constexpr int kRuns = 50'000;

void CheckTwoSidedTable(const CusumOptions& options, const std::vector<ArlRow>& rows,
                        std::uint64_t seed, const char* source) {
  Cusum chart(options);
  for (const ArlRow& row : rows) {
    const double shift = row.shift;
    const ArlEstimate arl = SimulateArl(
        chart, kRuns, seed++, [shift](Random& r) { return r.Normal() + shift; });
    std::printf("  %s: shift %.2f  MC %.3f +/- %.3f  published %g  COMP %g\n", source,
                row.shift, arl.mean, arl.standard_error, row.published, row.computed);
    EXPECT_NEAR(arl.mean, row.published, 0.05 * row.published)
        << source << " published, shift " << row.shift << " (MC " << arl.mean << " +/- "
        << arl.standard_error << ")";
    EXPECT_NEAR(arl.mean, row.computed, 4.0 * arl.standard_error)
        << "REFERENCES.md COMP integral equation, shift " << row.shift << " (MC "
        << arl.mean << " +/- " << arl.standard_error << ")";
  }
}

// Montgomery, Introduction to Statistical Quality Control, ch. 9, ARL table for
// k = 1/2, h = 4 (SEEN via the Montgomery & Runger Table 16-9 reproduction;
// REFERENCES.md 1.1). Second column: COMP two-sided, Nystrom solution of Page's
// integral equation (REFERENCES.md 1.1).
TEST(CusumArlTest, TwoSidedArlMatchesMontgomeryTableForKHalfHFour) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 4.0;
  CheckTwoSidedTable(options,
                     {{0.00, 168, 167.684},
                      {0.25, 74.2, 74.224},
                      {0.50, 26.6, 26.630},
                      {0.75, 13.3, 13.285},
                      {1.00, 8.38, 8.383},
                      {1.50, 4.75, 4.747},
                      {2.00, 3.34, 3.343},
                      {2.50, 2.62, 2.620},
                      {3.00, 2.19, 2.194},
                      {4.00, 1.71, 1.708}},
                     1000, "Montgomery ch. 9 CUSUM ARL table, k = 1/2, h = 4 (SEEN)");
}

// Same table, h = 5 (SEEN; REFERENCES.md 1.1), and COMP two-sided.
TEST(CusumArlTest, TwoSidedArlMatchesMontgomeryTableForKHalfHFive) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 5.0;
  CheckTwoSidedTable(options,
                     {{0.00, 465, 465.444},
                      {0.25, 139, 139.494},
                      {0.50, 38.0, 37.996},
                      {0.75, 17.0, 17.048},
                      {1.00, 10.4, 10.376},
                      {1.50, 5.75, 5.747},
                      {2.00, 4.01, 4.009},
                      {2.50, 3.11, 3.114},
                      {3.00, 2.57, 2.573},
                      {4.00, 2.01, 2.013}},
                     2000, "Montgomery ch. 9 CUSUM ARL table, k = 1/2, h = 5 (SEEN)");
}

// Lucas and Crosier (1982), Technometrics 24:199-205, Table 1: two-sided FIR
// CUSUM, k = 1/2, h = 4, headstart 2 (SEEN as a secondary quotation;
// REFERENCES.md 2.1). Second column: COMP (REFERENCES.md 2.3).
TEST(CusumArlTest, HeadstartArlMatchesLucasCrosierTableForHFour) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 4.0;
  options.headstart = 2.0;
  CheckTwoSidedTable(options,
                     {{0.00, 149, 148.696},
                      {0.25, 62.7, 62.698},
                      {0.50, 20.1, 20.064},
                      {0.75, 8.97, 8.968},
                      {1.00, 5.29, 5.287},
                      {1.50, 2.86, 2.862},
                      {2.00, 2.01, 2.014},
                      {2.50, 1.59, 1.586},
                      {3.00, 1.32, 1.325},
                      {4.00, 1.07, 1.067},
                      {5.00, 1.01, 1.006}},
                     3000, "Lucas & Crosier (1982) Table 1, h = 4, s = 2");
}

// Montgomery ch. 9, table of the CUSUM with and without FIR, k = 1/2, h = 5,
// headstart 2.5 (published values MEM; REFERENCES.md 2.2), and COMP.
TEST(CusumArlTest, HeadstartArlMatchesMontgomeryFirTableForHFive) {
  CusumOptions options;
  options.k = 0.5;
  options.h = 5.0;
  options.headstart = 2.5;
  CheckTwoSidedTable(options,
                     {{0.00, 430, 430.391},
                      {0.25, 122, 121.688},
                      {0.50, 28.7, 28.666},
                      {0.75, 11.2, 11.236},
                      {1.00, 6.35, 6.347},
                      {1.50, 3.37, 3.372},
                      {2.00, 2.36, 2.362},
                      {2.50, 1.86, 1.856},
                      {3.00, 1.54, 1.540},
                      {4.00, 1.16, 1.159}},
                     4000, "Montgomery ch. 9 FIR CUSUM table, h = 5, s = 2.5 (MEM)");
}

// ---------------------------------------------------------------------------
// OneSidedCusum

TEST(OneSidedCusumTest, OptionsAllowAnyFiniteReferenceValue) {
  std::string why;
  OneSidedCusumOptions options;
  options.k = -1.0;  // a lower scheme fed with -x uses a negative reference value
  EXPECT_TRUE(options.IsValid(&why)) << why;
  options.k = std::numeric_limits<double>::infinity();
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("k must be a finite number"), std::string::npos) << why;
  options.k = 1.0;
  options.h = 0.0;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("h must be finite and > 0"), std::string::npos) << why;
  options.h = 2.0;
  options.headstart = 2.0;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("headstart must be in [0, h)"), std::string::npos) << why;
  EXPECT_FALSE(OneSidedCusum::Create(options).ok());
}

// Common practice, no source: the recursion and the excursion bookkeeping by hand.
TEST(OneSidedCusumTest, AccumulatesIncrementsAndReportsTheExcursionMean) {
  OneSidedCusumOptions options;
  options.k = 1.0;
  options.h = 3.0;
  OneSidedCusum chart(options);
  // x:  0.5   3     0.2   2     2.5
  // S:  0     2     1.2   2.2   3.7 > 3 -> signal at reading 4
  // S stayed positive from reading 1: N = 4, mean = 1 + 3.7/4 = 1.925
  // = mean(3, 0.2, 2, 2.5).
  const double xs[] = {0.5, 3, 0.2, 2};
  for (int i = 0; i < 4; ++i) {
    StatusOr<Alarm> a = chart.Update(xs[i], At(i));
    ASSERT_TRUE(a.ok());
    EXPECT_FALSE(a->fired);
  }
  EXPECT_NEAR(chart.value(), 2.2, 1e-12);
  EXPECT_EQ(chart.length(), 3);
  EXPECT_EQ(chart.start(), At(1));
  EXPECT_FALSE(chart.Update(std::numeric_limits<double>::quiet_NaN(), At(9)).ok());
  EXPECT_NEAR(chart.value(), 2.2, 1e-12);
  StatusOr<Alarm> alarm = chart.Update(2.5, At(4));
  ASSERT_TRUE(alarm.ok());
  EXPECT_TRUE(alarm->fired);
  EXPECT_EQ(alarm->direction, Direction::kUp);
  EXPECT_EQ(alarm->change_at, At(1));
  EXPECT_NEAR(alarm->shift, 1.925, 1e-12);
  EXPECT_EQ(chart.value(), 0.0);  // restarted
}

// REFERENCES.md 7.2: exponential (time-between-events) upper CUSUM with
// k = 2 ln 2, signal S > h. COMP (Brook-Evans chain, not a published number).
TEST(OneSidedCusumTest, ExponentialInterArrivalArlMatchesMarkovChainValues) {
  OneSidedCusumOptions options;
  options.k = 2.0 * std::log(2.0);
  options.h = 4.0;
  OneSidedCusum chart(options);
  struct Row {
    double mean;
    double computed;
  };
  std::uint64_t seed = 5000;
  for (const Row& row :
       {Row{1.0, 76.938}, Row{1.5, 14.673}, Row{2.0, 7.401}, Row{3.0, 3.971}}) {
    const double theta = row.mean;
    const ArlEstimate arl = SimulateArl(
        chart, kRuns, seed++, [theta](Random& r) { return r.Exponential(theta); });
    std::printf("  exponential CUSUM h = 4: theta %.1f  MC %.3f +/- %.3f  COMP %g\n",
                theta, arl.mean, arl.standard_error, row.computed);
    EXPECT_NEAR(arl.mean, row.computed, 4.0 * arl.standard_error)
        << "REFERENCES.md 7.2 COMP, h = 4, theta " << theta << " (MC " << arl.mean
        << " +/- " << arl.standard_error << ")";
  }
}

}  // namespace
}  // namespace plumbline
