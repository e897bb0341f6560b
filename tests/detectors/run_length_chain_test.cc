#include "detectors/run_length_chain.h"

#include <Eigen/Dense>
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <numbers>
#include <vector>

#include "detectors/random.h"

namespace plumbline {
namespace {

double NormalCdf(double x) { return 0.5 * std::erfc(-x / std::numbers::sqrt2); }

// Increment of the upper normal CUSUM, Y = Z + delta - k, Z ~ N(0, 1).
IncrementCdf NormalIncrement(double delta, double k) {
  return [=](double y) { return NormalCdf(y - delta + k); };
}

// Increment of the exponential CUSUM, Y = X - k, X ~ Exponential(mean theta).
IncrementCdf ExponentialIncrement(double theta, double k) {
  return [=](double y) { return y + k <= 0 ? 0.0 : -std::expm1(-(y + k) / theta); };
}

double RelativeError(double actual, double expected) {
  return std::abs(actual - expected) / expected;
}

// ---------------------------------------------------------------------------
// REFERENCES.md 7.2 (COMP: fine-grid Brook-Evans chain with 500-2000 cells,
// Monte Carlo with 1 M runs agrees): exponential (time-between-events) CUSUM,
// S = max(0, S + X - k), X ~ Exp(mean theta), k = 2 ln 2, signal S > h.

TEST(RunLengthChainTest, ExponentialCusumMatchesReferencesSevenTwo) {
  const double k = 2.0 * std::numbers::ln2;
  const double thetas[] = {1.0, 1.5, 2.0, 3.0};
  const double h4[] = {76.938, 14.673, 7.401, 3.971};
  const double h6[] = {237.266, 24.091, 10.549, 5.208};
  double worst = 0.0;
  for (int i = 0; i < 4; ++i) {
    const double arl4 = OneSidedCusumArl(ExponentialIncrement(thetas[i], k), 4.0);
    const double arl6 = OneSidedCusumArl(ExponentialIncrement(thetas[i], k), 6.0);
    EXPECT_LE(RelativeError(arl4, h4[i]), 1e-3)
        << "h = 4, theta = " << thetas[i] << ": " << arl4;
    EXPECT_LE(RelativeError(arl6, h6[i]), 1e-3)
        << "h = 6, theta = " << thetas[i] << ": " << arl6;
    worst = std::max({worst, RelativeError(arl4, h4[i]), RelativeError(arl6, h6[i])});
  }
  std::printf("exponential CUSUM vs REFERENCES 7.2: worst relative error %.2e\n", worst);
}

// ---------------------------------------------------------------------------
// REFERENCES.md 1.1, one-sided (upper) column, COMP (Page's integral equation by
// Nystroem, converged to 9 digits); k = 0.5. The published two-sided values
// (Montgomery, ch. 9; MEM/SEEN per REFERENCES) are half of the delta = 0 entries.

TEST(RunLengthChainTest, NormalCusumMatchesReferencesOneOneOneSidedColumn) {
  const double deltas[] = {0, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0};
  const double h4[] = {335.368, 77.079, 26.679, 13.287, 8.383,
                       4.747,   3.343,  2.620,  2.194,  1.708};
  const double h5[] = {930.887, 141.688, 38.010, 17.049, 10.376,
                       5.747,   4.009,   3.114,  2.573,  2.013};
  double worst = 0.0;
  for (int i = 0; i < 10; ++i) {
    const double arl4 = OneSidedCusumArl(NormalIncrement(deltas[i], 0.5), 4.0);
    const double arl5 = OneSidedCusumArl(NormalIncrement(deltas[i], 0.5), 5.0);
    EXPECT_LE(RelativeError(arl4, h4[i]), 1e-3)
        << "h = 4, delta = " << deltas[i] << ": " << arl4;
    EXPECT_LE(RelativeError(arl5, h5[i]), 1e-3)
        << "h = 5, delta = " << deltas[i] << ": " << arl5;
    worst = std::max({worst, RelativeError(arl4, h4[i]), RelativeError(arl5, h5[i])});
  }
  // Published two-sided in-control values (Montgomery ch. 9, MEM): 168 and 465.
  EXPECT_NEAR(OneSidedCusumArl(NormalIncrement(0, 0.5), 4.0) / 2.0, 168, 0.5);
  EXPECT_NEAR(OneSidedCusumArl(NormalIncrement(0, 0.5), 5.0) / 2.0, 465, 0.5);
  std::printf("normal CUSUM vs REFERENCES 1.1: worst relative error %.2e\n", worst);
}

// REFERENCES.md 2.1 / 2.2, "FIR COMP one-sided upper" (Lucas & Crosier 1982
// headstart; COMP): the chain started at s = h / 2.
TEST(RunLengthChainTest, HeadstartMatchesReferencesTwoOneAndTwoTwo) {
  const double deltas[] = {0, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0};
  const double h4[] = {316.379, 66.567, 20.253, 8.991, 5.291,
                       2.862,   2.014,  1.586,  1.325, 1.067};
  const double h5[] = {895.834, 124.928, 28.757, 11.244, 6.348,
                       3.372,   2.362,   1.856,  1.540,  1.159};
  double worst = 0.0;
  for (int i = 0; i < 10; ++i) {
    const double arl4 = OneSidedCusumArl(NormalIncrement(deltas[i], 0.5), 4.0, 2.0);
    const double arl5 = OneSidedCusumArl(NormalIncrement(deltas[i], 0.5), 5.0, 2.5);
    EXPECT_LE(RelativeError(arl4, h4[i]), 1e-3)
        << "h = 4, delta = " << deltas[i] << ": " << arl4;
    EXPECT_LE(RelativeError(arl5, h5[i]), 1e-3)
        << "h = 5, delta = " << deltas[i] << ": " << arl5;
    worst = std::max({worst, RelativeError(arl4, h4[i]), RelativeError(arl5, h5[i])});
  }
  std::printf("headstart CUSUM vs REFERENCES 2.1/2.2: worst relative error %.2e\n",
              worst);
}

// ---------------------------------------------------------------------------
// Calibration.

// Round trip: the calibrated h gives the target ARL (to the 1e-4 relative
// bisection in h, which moves the ARL by ~h dlnARL/dh * 1e-4 < 1e-3).
TEST(RunLengthChainTest, CalibrateOneSidedCusumRoundTrips) {
  for (double arl0 : {50.0, 370.0, 5000.0}) {
    for (double k : {0.25, 0.5, 1.0}) {
      StatusOr<double> h = CalibrateOneSidedCusum(NormalIncrement(0, k), arl0);
      ASSERT_TRUE(h.ok()) << h.status().ToString();
      const double arl = OneSidedCusumArl(NormalIncrement(0, k), *h);
      EXPECT_GE(arl, arl0 * (1.0 - 1e-9))
          << "arl0 " << arl0 << ", k " << k;  // smallest h reaching it
      EXPECT_LE(RelativeError(arl, arl0), 1e-3) << "arl0 " << arl0 << ", k " << k;
    }
  }
  const double k = 2.0 * std::numbers::ln2;
  StatusOr<double> h = CalibrateOneSidedCusum(ExponentialIncrement(1.0, k), 500.0);
  ASSERT_TRUE(h.ok());
  EXPECT_LE(RelativeError(OneSidedCusumArl(ExponentialIncrement(1.0, k), *h), 500.0),
            1e-3);
}

// REFERENCES.md 1.3, one-sided h for ARL0 = 370 (COMP, exact integral
// equation; matches Hawkins 1993 as recalled, MEM): 6.708, 4.095, 2.882, 2.175.
TEST(RunLengthChainTest, CalibratedDecisionIntervalsMatchReferencesOneThree) {
  const double ks[] = {0.25, 0.5, 0.75, 1.0};
  const double hs[] = {6.708, 4.095, 2.882, 2.175};
  for (int i = 0; i < 4; ++i) {
    StatusOr<double> h = CalibrateOneSidedCusum(NormalIncrement(0, ks[i]), 370.0);
    ASSERT_TRUE(h.ok());
    EXPECT_NEAR(*h, hs[i], 1e-3) << "k = " << ks[i];
  }
}

TEST(RunLengthChainTest, CalibrateRejectsUnreachableAndInvalidTargets) {
  // A drift of +0.5 per step reaches any h in ~2h steps: ARL 1e6 is out of reach.
  StatusOr<double> h = CalibrateOneSidedCusum(NormalIncrement(1.0, 0.5), 1e6, 100.0);
  EXPECT_FALSE(h.ok());
  EXPECT_EQ(h.status().code(), Status::Code::kOutOfRange);
  EXPECT_FALSE(CalibrateOneSidedCusum(NormalIncrement(0, 0.5), 1.0).ok());
  EXPECT_FALSE(CalibrateOneSidedCusum(NormalIncrement(0, 0.5), std::nan("")).ok());
}

// ---------------------------------------------------------------------------
// An increment with an atom (the capped chi-square of the variance detector,
// min(Z^2, cap) - k): the chain against a seeded Monte Carlo of the same CUSUM
// (common practice, no source). 20 000 runs: standard error ~0.7%.
TEST(RunLengthChainTest, CappedChiSquareIncrementAgreesWithMonteCarlo) {
  const double k = 2.0 * std::numbers::ln2, cap = 12.25, h = 8.0;
  auto cdf = [=](double y) {
    const double x = y + k;
    if (x < 0) return 0.0;
    if (x >= cap) return 1.0;
    return std::erf(std::sqrt(0.5 * x));
  };
  const double chain = OneSidedCusumArl(cdf, h);
  Random random(2024);
  constexpr int kRuns = 20'000;
  double sum = 0.0, sum_sq = 0.0;
  for (int run = 0; run < kRuns; ++run) {
    double s = 0.0;
    long long n = 0;
    do {
      const double z = random.Normal();
      s = std::max(0.0, s + std::min(z * z, cap) - k);
      ++n;
    } while (s <= h);
    sum += static_cast<double>(n);
    sum_sq += static_cast<double>(n) * static_cast<double>(n);
  }
  const double mean = sum / kRuns;
  const double se = std::sqrt((sum_sq / kRuns - mean * mean) / kRuns);
  EXPECT_NEAR(chain, mean, 3.0 * se);
  std::printf("capped chi-square CUSUM, h = %.1f: chain %.3f, Monte Carlo %.3f +- %.3f\n",
              h, chain, mean, se);
}

// ---------------------------------------------------------------------------
// The chain from a sample against the chain of the sample's empirical CDF
// (exact equality: the re-fitted thresholds, and with them replay's alerts,
// must not depend on which entry point computes them; common practice, no source).

// Samples with ties, values far beyond the chain's edges on both sides, and
// values placed exactly on cell edges and just above them.
std::vector<std::vector<double>> EdgeCaseSamples(double h, int m) {
  Random random(77);
  std::vector<std::vector<double>> samples;
  std::vector<double> normal, ties, wide, on_edges;
  for (int i = 0; i < 1000; ++i) {
    const double z = random.Normal();
    normal.push_back(z - 0.5);
    ties.push_back(std::round(4.0 * z) / 4.0 - 0.5);  // many equal values
    wide.push_back(i % 10 == 0 ? (i % 20 == 0 ? 1e6 : -1e6) : 3.0 * z);
  }
  const double w = h / (m + 0.5);
  for (int i = 0; i < 300; ++i) {
    const int k = static_cast<int>(random.Uniform() * (2 * m + 3)) - (m + 1);
    on_edges.push_back((k + 0.5) * w);  // exactly an edge
    on_edges.push_back(std::nextafter(on_edges.back(), 1e9));
    on_edges.push_back(random.Normal());
  }
  for (auto* sample : {&normal, &ties, &wide, &on_edges}) {
    std::sort(sample->begin(), sample->end());
    samples.push_back(*sample);
  }
  return samples;
}

TEST(RunLengthChainTest, ArlFromSampleEqualsArlOfTheEmpiricalCdfBitForBit) {
  for (const double h : {0.37, 4.0, 11.3}) {
    for (const std::vector<double>& sample : EdgeCaseSamples(h, 80)) {
      const IncrementCdf cdf = [&sample](double y) { return EmpiricalCdf(sample, y); };
      EXPECT_EQ(OneSidedCusumArlFromSample(sample, h, 80), OneSidedCusumArl(cdf, h, 0.0, 80))
          << "h " << h;
    }
  }
}

// The chain is solved in O(m^2) (Levinson's recursion and a rank-one
// correction, run_length_chain.cc). Against the dense system of Brook and
// Evans as the header writes it, solved by LU with partial pivoting, for
// light- and heavy-tailed and discrete increments, up to ARLs of 2e7
// (a nearly singular I - R), from zero and from a head start: the same ARL to
// 1e-9, or 1e-14 times the ARL where that is more (common practice, no source).
double DenseChainArl(const IncrementCdf& cdf, double h, double start, int m) {
  const double w = h / (m + 0.5);
  const int n = m + 1;
  Eigen::MatrixXd a = Eigen::MatrixXd::Identity(n, n);
  for (int i = 0; i < n; ++i) {
    const double s = i * w;
    a(i, 0) -= cdf(0.5 * w - s);
    for (int j = 1; j < n; ++j) a(i, j) -= cdf((j + 0.5) * w - s) - cdf((j - 0.5) * w - s);
  }
  const Eigen::VectorXd arl = a.partialPivLu().solve(Eigen::VectorXd::Ones(n));
  const double position = start / w;
  const int lower = static_cast<int>(std::floor(position));
  if (lower >= n - 1) return arl[n - 1];
  const double fraction = position - lower;
  return (1.0 - fraction) * arl[lower] + fraction * arl[lower + 1];
}

TEST(RunLengthChainTest, ToeplitzSolveEqualsTheDenseChain) {
  const auto normal = [](double shift) {
    return IncrementCdf([shift](double y) { return 0.5 * std::erfc(-(y + shift) / std::sqrt(2.0)); });
  };
  const IncrementCdf laplace = [](double y) {  // Laplace(-0.5, 1): heavy tails
    const double x = y + 0.5;
    return x < 0 ? 0.5 * std::exp(x) : 1.0 - 0.5 * std::exp(-x);
  };
  // -1 or +1 with chances 0.7, 0.3 (h chosen so no cell edge falls on a jump,
  // where the two ways of rounding an edge may land on either side of it)
  const IncrementCdf lattice = [](double y) {
    return y < -1.0 ? 0.0 : y < 1.0 ? 0.7 : 1.0;
  };
  struct Case {
    IncrementCdf cdf;
    double h, start;
  };
  const std::vector<Case> cases = {{normal(0.5), 4.0, 0.0},  {normal(0.5), 5.0, 2.5},
                                   {normal(0.5), 9.0, 0.0},  {normal(0.5), 15.0, 0.0},
                                   {normal(1.0), 6.0, 0.0},
                                   {normal(-0.5), 3.0, 0.0}, {laplace, 8.0, 0.0},
                                   {laplace, 8.0, 4.0},      {lattice, 7.3, 0.0}};
  for (const Case& c : cases) {
    for (const int m : {20, 80, 150, 300}) {
      const double dense = DenseChainArl(c.cdf, c.h, c.start, m);
      const double dense_fine = DenseChainArl(c.cdf, c.h, c.start, 2 * m);
      const double expected = (4.0 * dense_fine - dense) / 3.0;
      // I - R's condition grows like the ARL, and so may either solve's error.
      const double tolerance = std::max(1e-9, 1e-14 * expected);
      EXPECT_NEAR(OneSidedCusumArl(c.cdf, c.h, c.start, m) / expected, 1.0, tolerance)
          << "h " << c.h << ", start " << c.start << ", m " << m << ", ARL " << expected;
    }
  }
  EXPECT_GT(DenseChainArl(normal(0.5), 15.0, 0.0, 150), 1e7);  // the cases reach far
}

// A sample whose increments never climb (a constant series' capped squares
// less k, say) gives a chain in which the statistic never leaves zero: no
// finite ARL, and the re-fit keeps its ceiling rather than failing or picking
// the floor (common practice, no source).
TEST(RunLengthChainTest, ASampleThatNeverClimbsKeepsTheCeiling) {
  for (const double value : {-1.0, -1e-3, 0.0}) {
    const std::vector<double> sample(200, value);
    const StatusOr<double> h = CalibrateOneSidedCusumFromSample(sample, 1000.0, 1.0, 40.0);
    ASSERT_TRUE(h.ok()) << value;
    EXPECT_EQ(*h, 40.0) << value;
  }
}

// The re-fit's search: the interval it returns reaches the target ARL, and one
// 1% below it does not (the contract bisection kept; the search now takes
// fewer chain solves). Samples: normal, heavy-tailed (t with 3 degrees of
// freedom, scaled) and bursty (exponential) increments, reference values k
// as the monitor uses them (common practice, no source).
TEST(RunLengthChainTest, CalibrateFromSampleBracketsTheTargetWithinOnePercent) {
  Random random(2026);
  std::vector<std::vector<double>> samples(3);
  for (int i = 0; i < 1000; ++i) {
    samples[0].push_back(random.Normal() - 0.5);
    const double chi = random.Normal() * random.Normal() + random.Normal() * random.Normal() +
                       random.Normal() * random.Normal();
    samples[1].push_back(random.Normal() / std::sqrt(chi / 3.0) / std::sqrt(3.0) - 0.5);
    samples[2].push_back(random.Exponential(1.0) - 2.0 * std::numbers::ln2);
  }
  for (std::vector<double>& sample : samples) {
    std::vector<double> sorted = sample;
    std::sort(sorted.begin(), sorted.end());
    for (const double arl0 : {200.0, 5000.0, 100000.0}) {
      const double floor = 1.0, ceiling = 60.0;
      auto h = CalibrateOneSidedCusumFromSample(sample, arl0, floor, ceiling);
      ASSERT_TRUE(h.ok()) << h.status().ToString();
      if (*h == floor || *h == ceiling) continue;  // held at a bound: checked below
      EXPECT_GE(OneSidedCusumArlFromSample(sorted, *h, 80), arl0) << arl0;
      EXPECT_LT(OneSidedCusumArlFromSample(sorted, 0.99 * *h, 80), arl0) << arl0;
    }
  }
  // Bounds: a target reached at the floor gives the floor, one beyond the
  // ceiling gives the ceiling; too small a sample is refused.
  EXPECT_EQ(*CalibrateOneSidedCusumFromSample(samples[0], 2.0, 1.0, 60.0), 1.0);
  EXPECT_EQ(*CalibrateOneSidedCusumFromSample(samples[0], 1e12, 1.0, 2.0), 2.0);
  EXPECT_FALSE(CalibrateOneSidedCusumFromSample(std::vector<double>(99, -1.0), 100, 1, 2).ok());
}

}  // namespace
}  // namespace plumbline
