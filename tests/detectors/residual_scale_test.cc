#include "detectors/residual_scale.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <limits>
#include <string>

#include "detectors/random.h"

namespace plumbline {
namespace {

// ---------------------------------------------------------------------------
// Options

// Common practice, no source: each rule names its option and its range.
TEST(ResidualScaleOptionsTest, IsValidNamesTheOptionAndItsRange) {
  std::string why;
  EXPECT_TRUE(ResidualScaleOptions{}.IsValid(&why));
  ResidualScaleOptions options;
  options.window = 9;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("window must be in [10, 1000000]"), std::string::npos) << why;
  options = ResidualScaleOptions{};
  options.clip = 1.4;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("clip must be in [1.5, 10]"), std::string::npos) << why;
  options.clip = std::numeric_limits<double>::quiet_NaN();
  EXPECT_FALSE(options.IsValid(&why));
  options = ResidualScaleOptions{};
  options.floor = 0.0;
  EXPECT_FALSE(options.IsValid(&why));
  EXPECT_NE(why.find("floor"), std::string::npos) << why;
}

// ---------------------------------------------------------------------------
// m(c) = E[min(Z^2, c^2)], Z ~ N(0, 1). COMP with scipy 1.10:
//   scipy.stats.norm.expect(lambda z: min(z * z, c * c), lb=-50, ub=50, points=[-c, c])
// gives 0.7784652161744698 (c = 1.5), 0.9775599834528068 (2.5),
// 0.9950072780344533 (3), 0.9998794954488744 (4).
// Note: the value quoted for c = 3 in the header before this test, 0.99495, was
// a misprint; the closed form there evaluates to 0.995007.
TEST(ResidualScaleTest, ClippedSecondMomentMatchesScipyExpectation) {
  EXPECT_NEAR(ResidualScale::ClippedSecondMoment(1.5), 0.7784652161744698, 1e-9);
  EXPECT_NEAR(ResidualScale::ClippedSecondMoment(2.5), 0.9775599834528068, 1e-9);
  EXPECT_NEAR(ResidualScale::ClippedSecondMoment(3.0), 0.9950072780344533, 1e-9);
  EXPECT_NEAR(ResidualScale::ClippedSecondMoment(4.0), 0.9998794954488744, 1e-9);
  EXPECT_NEAR(ResidualScale::ClippedSecondMoment(3.0), 0.99501, 1e-5);
  // Common practice, no source: no clipping in the limit.
  EXPECT_NEAR(ResidualScale::ClippedSecondMoment(10.0), 1.0, 1e-15);
}

// ---------------------------------------------------------------------------
// Behaviour on simulated residuals (seeded; common practice, no source).

// The time average of s2 over 400 000 N(0, sd^2) residuals (after one window)
// is within 1% of sd^2 and the average sigma within 2% of sd; measured: see output.
TEST(ResidualScaleTest, UnbiasedOnNormalResiduals) {
  for (double sd : {1.0, 3.0, 0.01}) {
    ResidualScale scale(ResidualScaleOptions{});
    Random random(42);
    double sum_sigma = 0.0, sum_s2 = 0.0;
    long long n = 0;
    for (int i = 0; i < 400'000; ++i) {
      ASSERT_TRUE(scale.Update(sd * random.Normal()));
      if (i >= 500) {
        sum_sigma += scale.sigma();
        sum_s2 += scale.sigma() * scale.sigma();
        ++n;
      }
    }
    const double mean_sigma = sum_sigma / static_cast<double>(n) / sd;
    const double mean_s2 = sum_s2 / static_cast<double>(n) / (sd * sd);
    EXPECT_NEAR(mean_sigma, 1.0, 0.02) << "sd " << sd;
    EXPECT_NEAR(mean_s2, 1.0, 0.01) << "sd " << sd;
    std::printf("sd %g: mean sigma / sd = %.5f, mean s2 / sd^2 = %.5f\n", sd, mean_sigma,
                mean_s2);
  }
}

// Header: one spike moves s2 by at most a c^2 sigma^2 / m(c) (a = 1 / window),
// i.e. by at most 9 / window of itself at c = 3 (the exact increase is
// (c^2 / m(c) - 1) / window = 8.05 / 500 = 1.6%, so sigma by 0.8%). Then it is
// forgotten: against a twin that never saw it, the gap shrinks like
// (1 - 1/window)^k (to below 1% of itself after 5 windows; e^-5 = 0.7%).
TEST(ResidualScaleTest, FiftySigmaOutlierMovesScaleByAtMostTheBoundAndIsForgotten) {
  ResidualScaleOptions options;
  ResidualScale scale(options), twin(options);
  Random random(7);
  for (int i = 0; i < 3000; ++i) {
    const double u = random.Normal();
    scale.Update(u);
    twin.Update(u);
  }
  const double before = scale.sigma();
  scale.Update(50.0 * before);
  twin.Update(0.0);  // the twin sees an ordinary (here: zero) residual instead
  const double s2_ratio = (scale.sigma() * scale.sigma()) / (before * before);
  EXPECT_LE(s2_ratio - 1.0, 9.0 / options.window);
  const double bound =
      (9.0 / ResidualScale::ClippedSecondMoment(3.0) - 1.0) / options.window;
  EXPECT_NEAR(s2_ratio - 1.0, bound, 1e-12);  // the spike is clipped exactly at 3 sigma
  std::printf(
      "50-sigma spike: s2 moved by %.4f%% (documented bound %.4f%%), sigma by %.4f%%\n",
      100.0 * (s2_ratio - 1.0), 100.0 * 9.0 / options.window,
      100.0 * (scale.sigma() / before - 1.0));
  const double gap = scale.sigma() - twin.sigma();
  ASSERT_GT(gap, 0.0);
  for (int i = 0; i < 5 * options.window; ++i) {
    const double u = random.Normal();
    scale.Update(u);
    twin.Update(u);
  }
  const double remaining = std::abs(scale.sigma() - twin.sigma()) / gap;
  EXPECT_LT(remaining, 0.01);
  std::printf("after 5 windows the spike's effect is %.3f%% of what it was\n",
              100.0 * remaining);
}

// After the sd doubles, sigma follows. Averaged over 200 seeded trials, it has
// covered at least 60% of the way (log scale) within one window and is within
// 2% of the new sd after five. (A plain running mean of squares would cover
// 1 - e^-1 = 63% of the way on the s2 scale in one window, 72% on the log-sigma
// scale; the clip at 3 old sigmas slows only the first steps.)
TEST(ResidualScaleTest, FollowsADoubledStandardDeviationWithinAWindow) {
  ResidualScaleOptions options;
  constexpr int kTrials = 200;
  double sum_before = 0.0, sum_one = 0.0, sum_five = 0.0;
  for (int trial = 0; trial < kTrials; ++trial) {
    ResidualScale scale(options);
    Random random(1000 + trial);
    for (int i = 0; i < 3000; ++i) scale.Update(random.Normal());
    sum_before += scale.sigma();
    for (int i = 0; i < options.window; ++i) scale.Update(2.0 * random.Normal());
    sum_one += scale.sigma();
    for (int i = 0; i < 4 * options.window; ++i) scale.Update(2.0 * random.Normal());
    sum_five += scale.sigma();
  }
  const double before = sum_before / kTrials, after_one = sum_one / kTrials,
               after_five = sum_five / kTrials;
  const double covered = std::log(after_one / before) / std::log(2.0 / before);
  EXPECT_GT(covered, 0.6);
  EXPECT_NEAR(after_five, 2.0, 0.04);
  std::printf(
      "doubled sd (mean of %d trials): sigma %.4f before, %.4f after one window "
      "(%.0f%% of the way on a log scale), %.4f after five\n",
      kTrials, before, after_one, 100.0 * covered, after_five);
}

// The first five residuals are combined by their median absolute value / 0.6745
// (header), so one wild early residual does not set the scale.
TEST(ResidualScaleTest, StartsFromTheMedianAbsoluteResidual) {
  ResidualScale scale(ResidualScaleOptions{});
  EXPECT_EQ(scale.sigma(), 0.0);
  const double residuals[] = {0.5, -1000.0, 0.7, -0.6, 0.4};
  for (double u : residuals) scale.Update(u);
  EXPECT_NEAR(scale.sigma(), 0.6 / 0.6744897501960817, 1e-12);
  EXPECT_EQ(scale.count(), 5);
}

TEST(ResidualScaleTest, IgnoresNonFiniteResiduals) {
  ResidualScale scale(ResidualScaleOptions{});
  for (int i = 0; i < 10; ++i) scale.Update(i % 2 ? 1.0 : -1.0);
  const double sigma = scale.sigma();
  EXPECT_FALSE(scale.Update(std::numeric_limits<double>::quiet_NaN()));
  EXPECT_FALSE(scale.Update(std::numeric_limits<double>::infinity()));
  EXPECT_EQ(scale.sigma(), sigma);
  EXPECT_EQ(scale.count(), 10);
}

// A stream of identical residuals gives sigma = floor, then the next different
// residual is taken whole (header: the scale does not stay stuck at zero).
TEST(ResidualScaleTest, ZeroResidualsGiveTheFloorAndDoNotLockIt) {
  ResidualScaleOptions options;
  ResidualScale scale(options);
  for (int i = 0; i < 100; ++i) scale.Update(0.0);
  EXPECT_EQ(scale.sigma(), options.floor);
  scale.Update(2.0);
  EXPECT_GT(scale.sigma(), 0.05);
}

// Restart shortens the running mean, so the scale re-learns faster.
TEST(ResidualScaleTest, RestartMakesTheScaleRelearnFaster) {
  ResidualScaleOptions options;
  ResidualScale slow(options), fast(options);
  Random random(3);
  for (int i = 0; i < 3000; ++i) {
    const double u = random.Normal();
    slow.Update(u);
    fast.Update(u);
  }
  fast.Restart(20);
  for (int i = 0; i < 100; ++i) {
    const double u = 3.0 * random.Normal();
    slow.Update(u);
    fast.Update(u);
  }
  EXPECT_GT(fast.sigma(), 2.0);
  EXPECT_LT(slow.sigma(), 1.6);
}

}  // namespace
}  // namespace plumbline
