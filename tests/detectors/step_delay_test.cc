// Detection delay on the non-textbook streams of false_alarm_test.cc: a 2-sd
// level step must be found within 1.5 x the median delay on independent
// Gaussian noise (the product's target; common practice, no source).
// Labelled `pending`: on AR(1) residuals with phi = 0.5 the whitened
// detectors take 13 readings against 7 on independent noise (1.86 times).
// tests/reference/step_delay_bound.py shows why the 1.5 target cannot be met
// at the same false-alarm rate: after the first reading a step d in AR(1)
// noise adds only d (1 - phi) / sqrt(1 - phi^2) = 0.58 d per innovation, so
// even the oracle CUSUM on the exact innovations, with k chosen for the
// shortest median delay, takes 11 readings against 5 (2.2 times); so does the
// likelihood-ratio CUSUM that weighs the first innovation after the step (2.31
// sd) by its own shift and the later ones (1.15 sd) by theirs; and the
// asymptotic bound ln(ARL0) / (delta^2 / 2) is three times longer. Invented data.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <vector>

#include <gtest/gtest.h>

#include "detectors/series_monitor.h"
#include "tests/support/noise_streams.h"

namespace plumbline {
namespace {

using namespace noise_streams;

// Median delay (readings from the first shifted reading to the alert, inclusive)
// of a 2-sd upward level step after three weeks, over 100 seeded trials.
double MedianDelayOfTwoSigmaStep(Noise noise) {
  auto design = ProfileDesign::Make(ProfileFor(noise));
  EXPECT_TRUE(design.ok());
  const double sd = noise == Noise::kPoisson ? std::sqrt(2.0) : 1.0;
  std::vector<double> delays;
  for (int trial = 0; trial < 100; ++trial) {
    const auto alert =
        FirstAlertAfterStep(*design, noise, 1000 + static_cast<std::uint64_t>(trial),
                            3000 + 7 * trial, 2.0 * sd, 400);
    if (alert) delays.push_back(alert->delay);
  }
  std::sort(delays.begin(), delays.end());
  const double median = delays.empty() ? 1e9 : delays[delays.size() / 2];
  std::printf("[figures] %s: 2-sd step found in %zu of 100 trials, median delay %.0f readings\n",
              Name(noise), delays.size(), median);
  return median;
}

TEST(FalseAlarmTest, TwoSigmaStepsAreFoundWithinOneAndAHalfTimesTheGaussianDelay) {
  const double gaussian = MedianDelayOfTwoSigmaStep(Noise::kGaussian);
  for (Noise noise : {Noise::kAutoregressive, Noise::kStudentT, Noise::kPoisson}) {
    EXPECT_LE(MedianDelayOfTwoSigmaStep(noise), 1.5 * gaussian) << Name(noise);
  }
}

}  // namespace
}  // namespace plumbline
