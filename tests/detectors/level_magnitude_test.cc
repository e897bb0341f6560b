// A level alert's magnitude is the step in the readings, not in the whitened
// residuals the detectors see. On AR(1) noise with phi = 0.5 a step d reaches
// the detectors as d after the first reading only as d (1 - phi) / sqrt(1 - phi^2)
// = 0.58 d (residual_whitener.h), so an estimate left in whitened units would
// be about 0.6 of the step; on independent noise the two agree. The tolerance
// (the median within 25% of the true step) is our own, no source: the
// detectors' shift estimates are means over short excursions that start where
// the detector thinks the change began. Invented data.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <vector>

#include "detectors/series_monitor.h"
#include "tests/support/noise_streams.h"

namespace plumbline {
namespace {

using namespace noise_streams;

// Median magnitude (in units of the noise's sd) of the first upward level
// alert after a 3-sd upward step, over 40 seeded trials.
double MedianMagnitudeOfThreeSigmaStep(Noise noise) {
  auto design = ProfileDesign::Make(ProfileFor(noise));
  EXPECT_TRUE(design.ok());
  std::vector<double> magnitudes;
  for (int trial = 0; trial < 40; ++trial) {
    const auto alert =
        FirstAlertAfterStep(*design, noise, 5000 + static_cast<std::uint64_t>(trial),
                            3000 + 11 * trial, 3.0, 200);
    if (alert) magnitudes.push_back(alert->event.magnitude);
  }
  EXPECT_GE(magnitudes.size(), 38u) << Name(noise);
  std::sort(magnitudes.begin(), magnitudes.end());
  const double median = magnitudes.empty() ? 0.0 : magnitudes[magnitudes.size() / 2];
  std::printf("[figures] %s: 3-sd step, %zu alerts, median magnitude %.2f sd\n",
              Name(noise), magnitudes.size(), median);
  return median;
}

TEST(LevelMagnitudeTest, AStepOnIndependentNoiseIsReportedAtItsSize) {
  EXPECT_NEAR(MedianMagnitudeOfThreeSigmaStep(Noise::kGaussian), 3.0, 0.75);
}

TEST(LevelMagnitudeTest,
     AStepOnAutocorrelatedNoiseIsReportedAtItsSizeNotItsWhitenedSize) {
  EXPECT_NEAR(MedianMagnitudeOfThreeSigmaStep(Noise::kAutoregressive), 3.0, 0.75);
}

}  // namespace
}  // namespace plumbline
