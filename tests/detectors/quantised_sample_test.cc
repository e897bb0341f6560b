// QuantisedSample: values read back within half a level of what was added, in
// order, clamped to the range; and a CUSUM threshold re-fitted from the values
// read back agrees with one fitted from the originals (the claim in the
// header). Invented data.
#include "detectors/quantised_sample.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <vector>

#include "detectors/random.h"
#include "detectors/run_length_chain.h"

namespace plumbline {
namespace {

TEST(QuantisedSampleTest, ReadsBackEachValueWithinHalfALevelInOrder) {
  const double low = -4.0, high = 4.0, step = (high - low) / 65535.0;
  QuantisedSample sample(low, high);
  Random random(7);
  std::vector<double> added;
  for (int i = 0; i < 5000; ++i) {
    added.push_back(std::clamp(random.Normal(), low, high));
    sample.Add(added.back());
  }
  const std::vector<double> values = sample.Values();
  ASSERT_EQ(values.size(), added.size());
  for (std::size_t i = 0; i < added.size(); ++i) {
    EXPECT_LE(std::abs(values[i] - added[i]), 0.5 * step * (1 + 1e-9)) << i;
  }
  // The ends of the range are levels of their own.
  QuantisedSample ends(low, high);
  ends.Add(low);
  ends.Add(high);
  EXPECT_EQ(ends.Values(), (std::vector<double>{low, high}));
}

TEST(QuantisedSampleTest, ClampsValuesOutsideItsRange) {
  QuantisedSample sample(0.0, 12.25);
  sample.Add(-3.0);
  sample.Add(40.0);
  EXPECT_EQ(sample.Values(), (std::vector<double>{0.0, 12.25}));
}

TEST(QuantisedSampleTest, ReadingBackIsStableAndReleaseEmpties) {
  // A checkpoint saves the values read back and a restore adds them again:
  // they must come back the same.
  QuantisedSample first(0.0, 6.0), second(0.0, 6.0);
  Random random(11);
  for (int i = 0; i < 1000; ++i) first.Add(std::min(random.Exponential(1.0), 6.0));
  for (double x : first.Values()) second.Add(x);
  EXPECT_EQ(first.Values(), second.Values());
  first.Release();
  EXPECT_TRUE(first.empty());
  EXPECT_TRUE(first.Values().empty());
}

// The monitor re-fits the variance chart's upper side from a sample of capped
// squares q = min(z^2, 12.25) less k_up (about 1.35), and the arrival model's
// slower side from capped exponential scores less its reference. The search
// closes in on h to 1%, so a threshold fitted to the quantised values must be
// within 1% of the one the original values need: the original sample's chain
// reaches arl0 at 1.01 h and not at 0.99 h.
TEST(QuantisedSampleTest, RefittedThresholdIsWithinTheSearchToleranceOfTheOriginals) {
  Random random(2026);
  for (const bool squares : {true, false}) {
    const double cap = squares ? 12.25 : 6.0;
    const double k = squares ? 1.35 : 1.4;
    QuantisedSample sample(0.0, cap);
    std::vector<double> original;
    for (int i = 0; i < 2000; ++i) {
      const double z = random.Normal() * 1.1;  // wider than the model: a re-fit is needed
      const double x =
          squares ? std::min(z * z, cap) : std::min(random.Exponential(1.0), cap);
      original.push_back(x - k);
      sample.Add(x);
    }
    std::vector<double> read_back = sample.Values();
    for (double& x : read_back) x -= k;
    std::vector<double> sorted = original;
    std::sort(sorted.begin(), sorted.end());
    for (const double arl0 : {5000.0, 400000.0}) {
      auto h = CalibrateOneSidedCusumFromSample(read_back, arl0, 1.0, 200.0);
      ASSERT_TRUE(h.ok()) << h.status().ToString();
      const char* what = squares ? "squares" : "exponential";
      ASSERT_LT(*h, 200.0) << what << arl0;  // found, not held at the ceiling
      EXPECT_GE(OneSidedCusumArlFromSample(sorted, 1.01 * *h, 80), arl0) << what << arl0;
      EXPECT_LT(OneSidedCusumArlFromSample(sorted, 0.99 * *h, 80), arl0) << what << arl0;
    }
  }
}

}  // namespace
}  // namespace plumbline
