#include "detectors/poisson_cusum.h"

#include <gtest/gtest.h>

#include <bit>
#include <cmath>
#include <cstdint>
#include <limits>
#include <numbers>
#include <string>

#include "detectors/random.h"
#include "detectors/snapshot.h"
#include "tests/reference/poisson_quantile_residual.inc"

namespace plumbline {
namespace {

constexpr EventTime kStep = kMicrosPerMinute;  // one reading a minute
EventTime At(int reading) {
  return EventTime{1'700'000'000} * kMicrosPerSecond + reading * kStep;
}

Alarm Feed(PoissonCusum& chart, double count, int reading) {
  StatusOr<Alarm> result = chart.Update(count, At(reading));
  EXPECT_TRUE(result.ok()) << result.status().ToString();
  return result.ok() ? *result : Alarm{};
}

double Arl(double mu, double k, double h, double start, PoissonSignalRule rule,
           PoissonCusumSide side = PoissonCusumSide::kUpper) {
  StatusOr<double> arl = PoissonCusumArl(mu, k, h, start, rule, side);
  EXPECT_TRUE(arl.ok()) << arl.status().ToString();
  return arl.ok() ? *arl : std::numeric_limits<double>::quiet_NaN();
}

double RelativeError(double actual, double expected) {
  return std::abs(actual - expected) / expected;
}

constexpr PoissonSignalRule kAtLeast = PoissonSignalRule::kAtLeast;
constexpr PoissonSignalRule kAbove = PoissonSignalRule::kAbove;

// ---------------------------------------------------------------------------
// Exact ARLs: REFERENCES.md 7.1 (COMP: exact Markov chain for Lucas 1985,
// "Counted data CUSUM's", Technometrics 27(2):129-144), both signal rules.

struct TableRow {
  double mu0, k, h;
  double mu[4];
  double arl_at_least[4];  // signal S >= h
  double arl_above[4];     // signal S > h
};

constexpr TableRow kSevenOne[] = {
    {4,
     5,
     10,
     {4, 5, 6, 8},
     {421.650, 29.808, 9.726, 3.964},
     {655.475, 34.881, 10.718, 4.297}},
    {4,
     5,
     8,
     {4, 5, 6, 8},
     {171.779, 20.861, 7.756, 3.296},
     {270.011, 25.134, 8.739, 3.630}},
    {1,
     2,
     5,
     {1, 1.25, 1.5, 2},
     {1903.543, 345.292, 96.684, 19.797},
     {6713.235, 842.302, 177.403, 26.568}},
    {2,
     3,
     6,
     {2, 2.5, 3, 4},
     {412.471, 62.571, 19.481, 6.190},
     {894.004, 95.996, 24.895, 7.184}},
};

TEST(PoissonCusumArlTest, ReproducesEveryEntryOfReferencesSevenOneForBothSignalRules) {
  double worst = 0.0;
  for (const TableRow& row : kSevenOne) {
    for (int i = 0; i < 4; ++i) {
      // REFERENCES.md 7.1 (COMP), Lucas 1985 designs: to 0.1%.
      const double at_least = Arl(row.mu[i], row.k, row.h, 0.0, kAtLeast);
      const double above = Arl(row.mu[i], row.k, row.h, 0.0, kAbove);
      EXPECT_LT(RelativeError(at_least, row.arl_at_least[i]), 1e-3)
          << "S >= h, mu0 " << row.mu0 << " k " << row.k << " h " << row.h << " mu "
          << row.mu[i] << ": " << at_least;
      EXPECT_LT(RelativeError(above, row.arl_above[i]), 1e-3)
          << "S > h, mu0 " << row.mu0 << " k " << row.k << " h " << row.h << " mu "
          << row.mu[i] << ": " << above;
      worst = std::max({worst, RelativeError(at_least, row.arl_at_least[i]),
                        RelativeError(above, row.arl_above[i])});
    }
  }
  std::printf("worst relative error against REFERENCES 7.1: %.2e\n", worst);
}

TEST(PoissonCusumArlTest, FastInitialResponseMatchesReferencesSevenOne) {
  // REFERENCES.md 7.1 FIR row (COMP): mu0 = 4, k = 5, h = 10, S_0 = 5, S >= h.
  const double mu[] = {4, 5, 6, 8};
  const double expected[] = {397.471, 22.381, 6.115, 2.364};
  for (int i = 0; i < 4; ++i) {
    const double arl = Arl(mu[i], 5.0, 10.0, 5.0, kAtLeast);
    EXPECT_LT(RelativeError(arl, expected[i]), 1e-3) << "mu " << mu[i] << ": " << arl;
  }
}

TEST(PoissonCusumArlTest, AgreesWithTheMonteCarloValuesOfReferencesSevenOne) {
  // REFERENCES.md 7.1 Monte Carlo checks (COMP): 421.00 +- 0.66 (mu = 4,
  // S >= 10) and 10.732 +- 0.010 (mu = 6, S > 10); the chain within 3 SE.
  EXPECT_NEAR(Arl(4.0, 5.0, 10.0, 0.0, kAtLeast), 421.00, 3 * 0.66);
  EXPECT_NEAR(Arl(6.0, 5.0, 10.0, 0.0, kAbove), 10.732, 3 * 0.010);
}

TEST(PoissonCusumArlTest, AboveRuleIsTheAtLeastRuleOneCountHigher) {
  // With integer k and h, S > h is S >= h + 1 (follows from the definitions;
  // no source).
  for (double mu : {0.5, 2.0, 3.0, 7.5}) {
    EXPECT_NEAR(Arl(mu, 3.0, 6.0, 0.0, kAbove), Arl(mu, 3.0, 7.0, 0.0, kAtLeast),
                1e-9 * Arl(mu, 3.0, 7.0, 0.0, kAtLeast));
  }
}

TEST(PoissonCusumArlTest, ScaledChainAgreesWithTheIntegerChainWhereTheyMustBeEqual) {
  // With integer k and a zero start S is a whole number, so a half-integer h
  // (which makes the chain scale by d = 2, with twice the states) must give the
  // integer chain's ARL: S >= 5.5 and S > 5.5 are both S >= 6, and S > 6.5 is
  // S > 6 (follows from the definitions; no source).
  for (double mu : {1.0, 2.0, 4.0}) {
    const double at_least_6 = Arl(mu, 3.0, 6.0, 0.0, kAtLeast);
    const double above_6 = Arl(mu, 3.0, 6.0, 0.0, kAbove);
    EXPECT_NEAR(Arl(mu, 3.0, 5.5, 0.0, kAtLeast), at_least_6, 1e-9 * at_least_6);
    EXPECT_NEAR(Arl(mu, 3.0, 5.5, 0.0, kAbove), at_least_6, 1e-9 * at_least_6);
    EXPECT_NEAR(Arl(mu, 3.0, 6.5, 0.0, kAbove), above_6, 1e-9 * above_6);
  }
}

TEST(PoissonCusumArlTest, RefusesBadArguments) {
  // Common practice, no source.
  EXPECT_EQ(PoissonCusumArl(0.0, 5, 10, 0, kAtLeast).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(PoissonCusumArl(4.0, 0.0, 10, 0, kAtLeast).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(PoissonCusumArl(4.0, 5, -1, 0, kAtLeast).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(PoissonCusumArl(4.0, 5, 10, 10, kAtLeast).status().code(),
            Status::Code::kInvalidArgument);
  // pi is no multiple of 1/d for d <= 1000.
  const StatusOr<double> irrational =
      PoissonCusumArl(4.0, std::numbers::pi, 10, 0, kAtLeast);
  EXPECT_EQ(irrational.status().code(), Status::Code::kInvalidArgument);
  EXPECT_NE(irrational.status().message().find("common 1/d"), std::string::npos)
      << irrational.status().message();
  // 1/1000 is representable, but h d = 10000 states is too many.
  EXPECT_EQ(PoissonCusumArl(4.0, 4.001, 10, 0, kAtLeast).status().code(),
            Status::Code::kInvalidArgument);
}

// ---------------------------------------------------------------------------
// Monte Carlo: the detector itself, run on seeded Poisson streams, against the
// chain. Run lengths between alarms are i.i.d. because the chart restarts at
// its headstart after every alarm.

struct MonteCarlo {
  double mean;
  double standard_error;
};

MonteCarlo SimulateArl(const PoissonCusumOptions& options, double mu, int runs,
                       std::uint64_t seed) {
  Random random(seed);
  PoissonCusum chart(options);
  double sum = 0.0, sum_sq = 0.0;
  int reading = 0;
  for (int run = 0; run < runs; ++run) {
    std::int64_t length = 0;
    while (true) {
      ++length;
      const Alarm alarm = Feed(chart, static_cast<double>(random.Poisson(mu)), ++reading);
      if (alarm.fired) break;
    }
    sum += static_cast<double>(length);
    sum_sq += static_cast<double>(length) * static_cast<double>(length);
  }
  const double mean = sum / runs;
  const double variance = (sum_sq / runs - mean * mean) * runs / (runs - 1.0);
  return {mean, std::sqrt(variance / runs)};
}

PoissonCusumOptions Upper(double mu0, double k, double h, double headstart,
                          PoissonSignalRule rule) {
  PoissonCusumOptions options;
  options.mu0 = mu0;
  options.k = k;
  options.h = h;
  options.headstart = headstart;
  options.rule = rule;
  return options;
}

void ExpectSimulationMatchesChain(const PoissonCusumOptions& options, double mu,
                                  double chain, int runs, std::uint64_t seed) {
  const MonteCarlo simulated = SimulateArl(options, mu, runs, seed);
  std::printf("mu %.2f: chain %.3f, simulated %.3f +- %.3f (%d runs)\n", mu, chain,
              simulated.mean, simulated.standard_error, runs);
  EXPECT_LT(RelativeError(simulated.mean, chain), 0.05)
      << "mu " << mu << ": simulated " << simulated.mean << " chain " << chain;
}

TEST(PoissonCusumMonteCarloTest, UpperSideAtLeastRuleMatchesTheChain) {
  // Lucas 1985 design of REFERENCES.md 7.1 (mu0 = 4, k = 5, h = 10, S >= h):
  // seeded simulation within 5% of the exact chain (MC error about 1%).
  const PoissonCusumOptions options = Upper(4, 5, 10, 0, kAtLeast);
  ExpectSimulationMatchesChain(options, 4.0, Arl(4, 5, 10, 0, kAtLeast), 10000, 71);
  ExpectSimulationMatchesChain(options, 6.0, Arl(6, 5, 10, 0, kAtLeast), 20000, 72);
}

TEST(PoissonCusumMonteCarloTest, UpperSideAboveRuleMatchesTheChain) {
  // Same design with S > h (REFERENCES.md 7.1 chain; MC 10.732 +- 0.010 at mu = 6).
  const PoissonCusumOptions options = Upper(4, 5, 10, 0, kAbove);
  ExpectSimulationMatchesChain(options, 6.0, Arl(6, 5, 10, 0, kAbove), 20000, 73);
  ExpectSimulationMatchesChain(options, 4.0, Arl(4, 5, 10, 0, kAbove), 5000, 74);
}

TEST(PoissonCusumMonteCarloTest, HeadstartMatchesTheChain) {
  // FIR row of REFERENCES.md 7.1 (S_0 = 5); restarts also go to the headstart.
  const PoissonCusumOptions options = Upper(4, 5, 10, 5, kAtLeast);
  ExpectSimulationMatchesChain(options, 6.0, Arl(6, 5, 10, 5, kAtLeast), 20000, 75);
}

TEST(PoissonCusumMonteCarloTest, LowerSideMatchesTheChain) {
  // No published table for the lower side: the chain against simulation.
  // mu0 = 4, k_down = (2 - 4)/(ln 2 - ln 4) = 2.885 rounded to 3, h_down = 5.
  PoissonCusumOptions options = Upper(4, 12, 100, 0, kAtLeast);  // upper never fires
  options.two_sided = true;
  options.k_down = 3.0;
  options.h_down = 5.0;
  for (double mu : {4.0, 2.0}) {
    const double chain = Arl(mu, 3.0, 5.0, 0.0, kAtLeast, PoissonCusumSide::kLower);
    ExpectSimulationMatchesChain(options, mu, chain, 10000, 76);
  }
  options.rule = kAbove;
  const double chain = Arl(4.0, 3.0, 5.0, 0.0, kAbove, PoissonCusumSide::kLower);
  ExpectSimulationMatchesChain(options, 4.0, chain, 10000, 77);
}

TEST(PoissonCusumMonteCarloTest, ScaledChainForAFractionalReferenceValueMatches) {
  // mu0 = 1, mu1 = 2: k = 1/ln 2 = 1.443, rounded to 1.5 (d = 2), h = 4.5.
  // The scaled chain (Lucas 1985's device for rational k; MEM) against simulation.
  const PoissonCusumOptions options = Upper(1, 1.5, 4.5, 0, kAtLeast);
  for (double mu : {1.0, 2.0}) {
    ExpectSimulationMatchesChain(options, mu, Arl(mu, 1.5, 4.5, 0, kAtLeast), 10000, 78);
  }
  // A denominator of 10: k = 1.4, h = 4.3, S > h.
  PoissonCusumOptions tenths = Upper(1, 1.4, 4.3, 0, kAbove);
  ExpectSimulationMatchesChain(tenths, 1.0, Arl(1.0, 1.4, 4.3, 0, kAbove), 10000, 79);
}

// ---------------------------------------------------------------------------
// Reference value and calibration

TEST(PoissonCusumCalibrationTest, ReferenceValueIsLucasFormula) {
  // k = (mu1 - mu0)/(ln mu1 - ln mu0) (Lucas 1985; MEM), worked by hand.
  EXPECT_NEAR(*PoissonCusumReferenceValue(4, 6), 2.0 / std::log(1.5), 1e-12);  // 4.9326
  EXPECT_NEAR(*PoissonCusumReferenceValue(2, 4), 2.0 / std::numbers::ln2,
              1e-12);  // 2.8854
  EXPECT_NEAR(*PoissonCusumReferenceValue(2, 1), 1.0 / std::numbers::ln2,
              1e-12);  // lower
  EXPECT_FALSE(PoissonCusumReferenceValue(2, 2).ok());
  EXPECT_FALSE(PoissonCusumReferenceValue(0, 2).ok());
  EXPECT_FALSE(PoissonCusumReferenceValue(2, std::nan("")).ok());
}

TEST(PoissonCusumCalibrationTest, RoundTripFindsTheSmallestWholeDecisionInterval) {
  // mu0 = 2, mu1 = 4: k = 2.885 rounds to 3 (Lucas 1985's rounding; MEM). The
  // returned h reaches the target and h - 1 does not (exact chain; REFERENCES
  // 7.1 gives ARL0 412.471 at h = 6 for S >= h).
  for (PoissonSignalRule rule : {kAtLeast, kAbove}) {
    for (double target : {500.0, 5000.0}) {
      const StatusOr<PoissonCusumDesign> design =
          CalibratePoissonCusum(2, 4, target, rule);
      ASSERT_TRUE(design.ok()) << design.status().ToString();
      EXPECT_EQ(design->side, PoissonCusumSide::kUpper);
      EXPECT_EQ(design->k, 3.0);
      EXPECT_EQ(design->k_denominator, 1);
      EXPECT_NEAR(design->reference_value, 2.0 / std::numbers::ln2, 1e-12);
      EXPECT_GE(design->arl0, target);
      EXPECT_NEAR(design->arl0, Arl(2, 3, design->h, 0, rule), 1e-9 * design->arl0);
      EXPECT_LT(Arl(2, 3, design->h - 1, 0, rule), target);
      EXPECT_NEAR(design->arl1, Arl(4, 3, design->h, 0, rule), 1e-9 * design->arl1);
      std::printf("rule %s, ARL0 >= %.0f: h = %.0f, ARL0 = %.3f, ARL(mu1) = %.3f\n",
                  std::string(ToString(rule)).c_str(), target, design->h, design->arl0,
                  design->arl1);
    }
  }
  // S >= h with ARL0 >= 400 is the 7.1 design h = 6 (ARL0 412.471).
  EXPECT_EQ(CalibratePoissonCusum(2, 4, 400, kAtLeast)->h, 6.0);
}

TEST(PoissonCusumCalibrationTest, LowerSideAndFractionalReferenceValueRoundTrip) {
  // mu0 = 4 -> mu1 = 2: lower side, k = 2.885 -> 3. mu0 = 1 -> mu1 = 2:
  // k = 1.443, and 1 would move it 31%, so k = 3/2 (d = 2). No source: the
  // rounding rule is ours (see the header).
  const StatusOr<PoissonCusumDesign> lower = CalibratePoissonCusum(4, 2, 1000, kAtLeast);
  ASSERT_TRUE(lower.ok()) << lower.status().ToString();
  EXPECT_EQ(lower->side, PoissonCusumSide::kLower);
  EXPECT_EQ(lower->k, 3.0);
  EXPECT_GE(lower->arl0, 1000.0);
  EXPECT_LT(Arl(4, 3, lower->h - 1, 0, kAtLeast, PoissonCusumSide::kLower), 1000.0);
  EXPECT_LT(lower->arl1, lower->arl0);

  const StatusOr<PoissonCusumDesign> fractional =
      CalibratePoissonCusum(1, 2, 1000, kAtLeast);
  ASSERT_TRUE(fractional.ok()) << fractional.status().ToString();
  EXPECT_EQ(fractional->k_denominator, 2);
  EXPECT_EQ(fractional->k, 1.5);
  EXPECT_GE(fractional->arl0, 1000.0);
  EXPECT_LT(Arl(1, 1.5, fractional->h - 1, 0, kAtLeast), 1000.0);
  std::printf(
      "lower 4 -> 2: h = %.0f (ARL0 %.1f, ARL1 %.2f); 1 -> 2: k = %.1f, h = %.0f "
      "(ARL0 %.1f, ARL1 %.2f)\n",
      lower->h, lower->arl0, lower->arl1, fractional->k, fractional->h, fractional->arl0,
      fractional->arl1);

  // An explicit denominator of 1 keeps k whole (Lucas 1985's integer k; MEM).
  EXPECT_EQ(CalibratePoissonCusum(1, 2, 1000, kAtLeast, 1)->k, 1.0);
}

TEST(PoissonCusumCalibrationTest, RefusesBadTargetsAndReportsUnreachableOnes) {
  // Common practice, no source.
  EXPECT_EQ(CalibratePoissonCusum(2, 4, 0.5).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(CalibratePoissonCusum(2, 2, 500).status().code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(CalibratePoissonCusum(2, 4, 500, kAtLeast, -1).status().code(),
            Status::Code::kInvalidArgument);
  // k = 1/1000 of a count is below mu0: the drift is upward and ARL0 grows only
  // linearly in h, so 1e12 is out of reach of 2000 states.
  EXPECT_EQ(CalibratePoissonCusum(2, 4, 1e12, kAtLeast, 1000).status().code(),
            Status::Code::kOutOfRange);
}

// ---------------------------------------------------------------------------
// Options, refusals and alarms

TEST(PoissonCusumOptionsTest, IsValidNamesTheOptionAndItsRange) {
  // Common practice, no source: each rule names its option and its range.
  std::string why;
  EXPECT_TRUE(PoissonCusumOptions{}.IsValid(&why));
  PoissonCusumOptions two_sided;
  two_sided.two_sided = true;
  EXPECT_TRUE(two_sided.IsValid(nullptr));

  auto expect_refused = [](const PoissonCusumOptions& options, const std::string& text) {
    std::string message;
    EXPECT_FALSE(options.IsValid(&message)) << text;
    EXPECT_FALSE(options.IsValid(nullptr)) << text;
    EXPECT_NE(message.find(text), std::string::npos) << message;
    const StatusOr<PoissonCusum> chart = PoissonCusum::Create(options);
    EXPECT_EQ(chart.status().code(), Status::Code::kInvalidArgument);
  };
  PoissonCusumOptions options;
  options.mu0 = 0.0;
  expect_refused(options, "mu0 must be finite and > 0");
  options = {};
  options.k = -1.0;
  expect_refused(options, "k must be finite and > 0");
  options = {};
  options.h = std::numeric_limits<double>::infinity();
  expect_refused(options, "h must be finite and > 0");
  options = {};
  options.headstart = options.h;
  expect_refused(options, "headstart must be in [0, h)");
  options = two_sided;
  options.k_down = 0.0;
  expect_refused(options, "k_down must be finite and > 0");
  options = two_sided;
  options.h_down = std::nan("");
  expect_refused(options, "h_down must be finite and > 0");
  options = two_sided;
  options.headstart_down = -1.0;
  expect_refused(options, "headstart_down must be in [0, h_down)");
  options = {};
  options.arl0 = 0.5;
  expect_refused(options, "arl0 must be 0");

  // The lower-side options are ignored when the chart is one-sided.
  PoissonCusumOptions one_sided;
  one_sided.k_down = -1.0;
  EXPECT_TRUE(one_sided.IsValid(nullptr));
}

TEST(PoissonCusumOptionsTest, DefaultsAreTheReferencesSevenOneDesign) {
  // REFERENCES.md 7.1 (COMP; Lucas 1985 design mu0 = 2, k = 3, h = 6, S >= h):
  // ARL 412.471 in control and 6.190 at mu = 4.
  const PoissonCusumOptions options;
  EXPECT_EQ(options.rule, kAtLeast);
  EXPECT_LT(
      RelativeError(Arl(options.mu0, options.k, options.h, 0, options.rule), 412.471),
      1e-3);
  EXPECT_LT(RelativeError(Arl(4.0, options.k, options.h, 0, options.rule), 6.190), 1e-3);
}

TEST(PoissonCusumTest, RefusesNonCountsWithoutChangingState) {
  // Common practice, no source: a count is a finite non-negative whole number.
  PoissonCusumOptions options;
  options.two_sided = true;
  PoissonCusum chart(options);
  Feed(chart, 5, 1);  // S = 2, T = 0
  Feed(chart, 0, 2);  // S = 0, T = 1
  Feed(chart, 6, 3);  // S = 3, T = 0
  const double upper = chart.upper(), lower = chart.lower();
  const std::int64_t readings = chart.readings_since_restart();
  for (double bad : {std::nan(""), std::numeric_limits<double>::infinity(),
                     -std::numeric_limits<double>::infinity(), -1.0, 2.5, 1e-300}) {
    const StatusOr<Alarm> result = chart.Update(bad, At(4));
    EXPECT_EQ(result.status().code(), Status::Code::kInvalidArgument) << bad;
    EXPECT_NE(result.status().message().find("count must be"), std::string::npos);
  }
  EXPECT_EQ(chart.upper(), upper);
  EXPECT_EQ(chart.lower(), lower);
  EXPECT_EQ(chart.readings_since_restart(), readings);
  EXPECT_EQ(chart.alarms(), 0);
}

TEST(PoissonCusumTest, UpperAlarmReportsExcursionStartAndMeanShift) {
  // Hand-worked, no source: mu0 = 2, k = 3, h = 6, S >= h. Counts 1, 5, 4, 5, 4:
  // S = 0, 2, 3, 5, 6 -> signal at reading 5; excursion readings 2..5, mean
  // 4.5 = 3 + 6/4, shift 4.5 - 2 = 2.5.
  PoissonCusum chart(PoissonCusumOptions{});
  const double counts[] = {1, 5, 4, 5};
  for (int i = 0; i < 4; ++i) EXPECT_FALSE(Feed(chart, counts[i], i + 1).fired);
  EXPECT_EQ(chart.upper(), 5.0);
  EXPECT_EQ(chart.upper_length(), 3);
  EXPECT_EQ(chart.upper_start(), At(2));
  const Alarm alarm = Feed(chart, 4, 5);
  EXPECT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kUp);
  EXPECT_EQ(alarm.change_at, At(2));
  EXPECT_DOUBLE_EQ(alarm.shift, 2.5);
  EXPECT_EQ(alarm.statistic, 6.0);
  EXPECT_EQ(chart.alarms(), 1);
  EXPECT_EQ(chart.upper(), 0.0);  // restarted
  EXPECT_EQ(chart.readings_since_restart(), 0);

  // S > h: the same counts do not fire at S = 6; a further 4 gives S = 7 > 6,
  // excursion mean (5 + 4 + 5 + 4 + 4)/5 = 4.4, shift 2.4.
  PoissonCusumOptions above;
  above.rule = kAbove;
  PoissonCusum strict(above);
  const double more[] = {1, 5, 4, 5, 4};
  for (int i = 0; i < 5; ++i) EXPECT_FALSE(Feed(strict, more[i], i + 1).fired);
  const Alarm late = Feed(strict, 4, 6);
  EXPECT_TRUE(late.fired);
  EXPECT_EQ(late.change_at, At(2));
  EXPECT_DOUBLE_EQ(late.shift, 2.4);
}

TEST(PoissonCusumTest, LowerAlarmReportsDirectionDownAndNegativeShift) {
  // Hand-worked, no source: mu0 = 4, k_down = 3, h_down = 4, S >= h. Counts
  // 6, 0, 1: T = 0, 3, 5 -> signal at reading 3; excursion readings 2..3,
  // mean 0.5 = 3 - 5/2, shift 0.5 - 4 = -3.5.
  PoissonCusumOptions options;
  options.mu0 = 4;
  options.k = 5;
  options.h = 10;
  options.two_sided = true;
  options.k_down = 3;
  options.h_down = 4;
  PoissonCusum chart(options);
  EXPECT_FALSE(Feed(chart, 6, 1).fired);
  EXPECT_FALSE(Feed(chart, 0, 2).fired);
  EXPECT_EQ(chart.lower(), 3.0);
  const Alarm alarm = Feed(chart, 1, 3);
  EXPECT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.direction, Direction::kDown);
  EXPECT_EQ(alarm.change_at, At(2));
  EXPECT_DOUBLE_EQ(alarm.shift, -3.5);
  EXPECT_EQ(alarm.statistic, 5.0);
  EXPECT_EQ(chart.lower(), 0.0);
  EXPECT_EQ(chart.upper(), 0.0);

  // One-sided, the same counts never fire and T stays 0.
  options.two_sided = false;
  PoissonCusum one_sided(options);
  for (int i = 0; i < 20; ++i) EXPECT_FALSE(Feed(one_sided, 0, i + 1).fired);
  EXPECT_EQ(one_sided.lower(), 0.0);
}

TEST(PoissonCusumTest, HeadstartIsSubtractedFromTheShiftAndRestoredAfterAlarm) {
  // Hand-worked, no source: mu0 = 4, k = 5, h = 10, S_0 = 5 (the FIR design of
  // REFERENCES 7.1). A count of 10 gives S = 10 at reading 1: mean 10 =
  // 5 + (10 - 5)/1, shift 6; change_at is that first reading.
  PoissonCusumOptions options;
  options.mu0 = 4;
  options.k = 5;
  options.h = 10;
  options.headstart = 5;
  PoissonCusum chart(options);
  const Alarm alarm = Feed(chart, 10, 1);
  EXPECT_TRUE(alarm.fired);
  EXPECT_EQ(alarm.change_at, At(1));
  EXPECT_DOUBLE_EQ(alarm.shift, 6.0);
  EXPECT_EQ(chart.upper(), 5.0);
  chart.Reset();
  EXPECT_EQ(chart.upper(), 5.0);
  EXPECT_EQ(chart.alarms(), 0);
}

TEST(PoissonCusumTest, FractionalReferenceValueTiesWithTheLimitAreJudgedExactly) {
  // Regression: with k = 0.7 three counts of 1 give S = 0.9000000000000001 in
  // floating point, which must count as S = h = 0.9 (no source: arithmetic).
  PoissonCusumOptions options;
  options.mu0 = 0.2;
  options.k = 0.7;
  options.h = 0.9;
  options.rule = kAbove;
  PoissonCusum strict(options);
  EXPECT_FALSE(Feed(strict, 1, 1).fired);
  EXPECT_FALSE(Feed(strict, 1, 2).fired);
  EXPECT_FALSE(Feed(strict, 1, 3).fired);  // S = 0.9, not > 0.9
  EXPECT_TRUE(Feed(strict, 1, 4).fired);   // S = 1.2
  options.rule = kAtLeast;
  PoissonCusum at_least(options);
  EXPECT_FALSE(Feed(at_least, 1, 1).fired);
  EXPECT_FALSE(Feed(at_least, 1, 2).fired);
  EXPECT_TRUE(Feed(at_least, 1, 3).fired);  // S = 0.9 >= 0.9

  // And a statistic that should return to 0 does (k = 0.1: one count, then
  // nine zeros), so the next excursion starts afresh.
  options.k = 0.1;
  options.h = 5;
  PoissonCusum chart(options);
  Feed(chart, 1, 1);
  for (int i = 2; i <= 10; ++i) Feed(chart, 0, i);
  EXPECT_EQ(chart.upper(), 0.0);
  EXPECT_EQ(chart.upper_length(), 0);
}

TEST(PoissonCusumTest, ScaledMeanIsTheChartForTheScaledDesign) {
  // Lucas's k is proportional to mu0 for a fixed ratio mu1 / mu0, so a chart
  // for mu0 = 2 fed mean ratio 2 must move exactly like a chart designed for
  // mu0 = 4 with k and k_down doubled (the time-varying-mean chart; MEM).
  PoissonCusumOptions base;
  base.two_sided = true;
  PoissonCusumOptions doubled = base;
  doubled.mu0 = 4.0;
  doubled.k = 2.0 * base.k;
  doubled.k_down = 2.0 * base.k_down;
  PoissonCusum scaled(base), direct(doubled);
  Random random(5);
  for (int i = 1; i <= 2000; ++i) {
    const double count = static_cast<double>(random.Poisson(i < 1000 ? 4.0 : 6.5));
    const StatusOr<Alarm> a = scaled.Update(count, At(i), 2.0);
    const StatusOr<Alarm> b = direct.Update(count, At(i));
    ASSERT_TRUE(a.ok() && b.ok());
    ASSERT_EQ(a->fired, b->fired) << i;
    ASSERT_DOUBLE_EQ(scaled.upper(), direct.upper()) << i;
    ASSERT_DOUBLE_EQ(scaled.lower(), direct.lower()) << i;
    if (a->fired) {
      EXPECT_EQ(a->change_at, b->change_at);
      EXPECT_NEAR(a->shift, b->shift, 1e-9);
    }
  }
  EXPECT_GT(direct.alarms(), 0);
}

TEST(PoissonCusumTest, ShiftUnderAMovingMeanIsTheMeanExcessOverIt) {
  // Hand-worked, no source: mu0 = 2, k = 3, h = 6. Ratios 1, 2, 1 (means 2, 4,
  // 2) and counts 5, 9, 6: S = 2, 2 + 9 - 6 = 5, 5 + 6 - 3 = 8 >= 6. The
  // excursion holds all three readings; excess (5-2) + (9-4) + (6-2) = 12,
  // shift 4 counts per reading.
  PoissonCusum chart(PoissonCusumOptions{});
  ASSERT_FALSE(chart.Update(5, At(1), 1.0)->fired);
  ASSERT_FALSE(chart.Update(9, At(2), 2.0)->fired);
  const StatusOr<Alarm> alarm = chart.Update(6, At(3), 1.0);
  ASSERT_TRUE(alarm.ok());
  EXPECT_TRUE(alarm->fired);
  EXPECT_EQ(alarm->change_at, At(1));
  EXPECT_DOUBLE_EQ(alarm->shift, 4.0);
}

TEST(PoissonCusumTest, RefusesABadMeanRatioWithoutChangingState) {
  PoissonCusum chart(PoissonCusumOptions{});
  Feed(chart, 5, 1);
  for (double ratio : {0.0, -1.0, std::numeric_limits<double>::quiet_NaN(),
                       std::numeric_limits<double>::infinity()}) {
    EXPECT_FALSE(chart.Update(3, At(2), ratio).ok());
  }
  EXPECT_EQ(chart.upper(), 2.0);
  EXPECT_EQ(chart.readings_since_restart(), 1);
}

TEST(PoissonCusumTest, LowerSideReadsItsOwnRatioAndZerosWhereNoneAreExpectedAddNothing) {
  // Hand-worked, no source: two-sided, mu0 = 2, k_down = 1, h_down = 3. With
  // the upper side's ratio floored at 0.05 and the lower side's ratio 0 (a
  // closed hour), zero counts leave the lower side at 0 however many there
  // are; read at the floored ratio they would climb by 0.05 each.
  PoissonCusumOptions o;
  o.two_sided = true;
  o.k_down = 1.0;
  o.h_down = 3.0;
  PoissonCusum own(o), floored(o);
  for (int i = 1; i <= 100; ++i) {
    ASSERT_FALSE(own.Update(0, At(i), 0.05, 0.0)->fired);
    ASSERT_TRUE(floored.Update(0, At(i), 0.05).ok());
  }
  EXPECT_EQ(own.lower(), 0.0);
  EXPECT_EQ(own.upper(), floored.upper());
  EXPECT_GT(floored.alarms(), 0);
  // Where the ratios agree the two forms are one chart: ratio 1 then counts
  // 0, 0, 0 give T = 1, 2, 3 >= 3.
  PoissonCusum chart(o);
  ASSERT_FALSE(chart.Update(0, At(1), 1.0, 1.0)->fired);
  ASSERT_FALSE(chart.Update(0, At(2), 1.0, 1.0)->fired);
  const StatusOr<Alarm> alarm = chart.Update(0, At(3), 1.0, 1.0);
  ASSERT_TRUE(alarm.ok());
  EXPECT_TRUE(alarm->fired);
  EXPECT_EQ(alarm->direction, Direction::kDown);
  // A negative or non-finite lower ratio is refused, state untouched.
  for (double ratio : {-0.5, std::numeric_limits<double>::quiet_NaN(),
                       std::numeric_limits<double>::infinity()}) {
    EXPECT_FALSE(chart.Update(0, At(4), 1.0, ratio).ok());
  }
  EXPECT_EQ(chart.readings_since_restart(), 0);
}

TEST(PoissonCusumTest, SavedChartContinuesExactlyAndForgedStateIsRefused) {
  PoissonCusumOptions o;
  o.two_sided = true;
  o.headstart = 3.0;
  PoissonCusum original(o);
  Random random(9);
  for (int i = 1; i <= 300; ++i) Feed(original, static_cast<double>(random.Poisson(2.6)), i);
  SnapshotWriter w;
  original.Save(w);
  const std::string bytes = w.Take();
  PoissonCusum restored(PoissonCusumOptions{});
  SnapshotReader r(bytes);
  ASSERT_TRUE(restored.Load(r).ok()) << r.status().ToString();
  EXPECT_TRUE(r.AtEnd());
  EXPECT_EQ(restored.options().headstart, 3.0);
  for (int i = 301; i <= 900; ++i) {
    const double count = static_cast<double>(random.Poisson(i < 600 ? 2.0 : 4.0));
    const Alarm a = Feed(original, count, i);
    const Alarm b = Feed(restored, count, i);
    ASSERT_EQ(a.fired, b.fired) << i;
    ASSERT_EQ(original.upper(), restored.upper()) << i;
  }
  EXPECT_EQ(original.alarms(), restored.alarms());

  // Tag (4 bytes), eight options of 8 bytes, two flags, then the upper side.
  auto forged = [&](std::size_t offset, double value) {
    std::string copy = bytes;
    const std::uint64_t bits = std::bit_cast<std::uint64_t>(value);
    for (int i = 0; i < 8; ++i) copy[offset + i] = static_cast<char>(bits >> (8 * i));
    PoissonCusum loaded(PoissonCusumOptions{});
    SnapshotReader reader(copy);
    return loaded.Load(reader);
  };
  EXPECT_FALSE(forged(4, -2.0).ok());                                       // mu0
  EXPECT_FALSE(forged(4 + 8 * 2, std::numeric_limits<double>::quiet_NaN()).ok());  // h
  EXPECT_FALSE(forged(4 + 8 * 3, 50.0).ok());  // headstart above h
  EXPECT_FALSE(forged(4 + 8 * 8 + 2, -1.0).ok());  // a negative statistic
  EXPECT_TRUE(forged(4 + 8 * 8 + 2, 1.0).ok());
  std::string bad_rule = bytes;
  bad_rule[4 + 8 * 8 + 1] = 7;
  PoissonCusum loaded(PoissonCusumOptions{});
  SnapshotReader reader(bad_rule);
  EXPECT_FALSE(loaded.Load(reader).ok());
}

TEST(PoissonCusumTest, EnumsRoundTripThroughText) {
  // Common practice, no source.
  for (PoissonSignalRule rule : {kAtLeast, kAbove}) {
    EXPECT_EQ(PoissonSignalRuleFromString(ToString(rule)), rule);
  }
  for (PoissonCusumSide side : {PoissonCusumSide::kUpper, PoissonCusumSide::kLower}) {
    EXPECT_EQ(PoissonCusumSideFromString(ToString(side)), side);
  }
  EXPECT_FALSE(PoissonSignalRuleFromString(">=").has_value());
  EXPECT_FALSE(PoissonCusumSideFromString("both").has_value());
}

// Mid-p quantile residuals against scipy.stats (tests/reference/
// poisson_quantile_residual.py): means from 0.05 to 9.5, counts from 0 to far
// in the upper tail, where the upper-tail form keeps the precision.
TEST(PoissonMidPQuantileResidualTest, AgreesWithScipy) {
  using namespace poisson_quantile_residual_reference;
  for (const Case& c : kCasesTable) {
    EXPECT_NEAR(PoissonMidPQuantileResidual(c.count, c.mean), c.residual,
                1e-9 * std::max(1.0, std::abs(c.residual)))
        << "mean " << c.mean << " count " << c.count;
  }
}

// What the monitor relies on: residuals of counts drawn at their mean are
// near centred and no wider than N(0, 1), and their upper tail is no heavier
// than the normal one where (y - mean) / sqrt(mean) is far heavier. Mid-p
// narrows small counts (by the exact sums: mean 0.064 and variance 0.55 at
// mean 0.4; 0.015 and 0.87 at 2; 0.001 and 0.98 at 9.5), so the level
// detectors are more cautious at quiet hours. Invented draws.
TEST(PoissonMidPQuantileResidualTest, CountsAtTheirMeanGiveNearStandardResiduals) {
  Random random(31);
  for (const double mean : {0.4, 2.0, 9.5}) {
    const int n = 200000;
    double sum = 0, squares = 0;
    int beyond = 0, beyond_naive = 0;
    for (int i = 0; i < n; ++i) {
      const double y = static_cast<double>(random.Poisson(mean));
      const double r = PoissonMidPQuantileResidual(y, mean);
      sum += r;
      squares += r * r;
      beyond += r > 2.5;
      beyond_naive += (y - mean) / std::sqrt(mean) > 2.5;
    }
    const double average = sum / n, variance = squares / n - average * average;
    EXPECT_NEAR(average, 0.0, 0.1) << mean;
    EXPECT_GT(variance, 0.5) << mean;
    EXPECT_LT(variance, 1.02) << mean;
    // P(Z > 2.5) = 0.0062 for N(0, 1).
    EXPECT_LT(static_cast<double>(beyond) / n, 0.0062 * 1.6) << mean;
    if (mean < 1) {
      EXPECT_GT(beyond_naive, 3 * beyond) << mean;
    }
  }
  EXPECT_TRUE(std::isnan(PoissonMidPQuantileResidual(1.0, 0.0)));
  EXPECT_GT(PoissonMidPQuantileResidual(5000.0, 0.4),
            19.0);  // tail underflow held finite
}

}  // namespace
}  // namespace plumbline
