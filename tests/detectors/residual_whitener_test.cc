// ResidualWhitener: the correlation it learns from an AR(1) plus white noise,
// and its response to a step, against the filter itself. Invented data.
#include "detectors/residual_whitener.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <vector>

#include "detectors/random.h"

namespace plumbline {
namespace {

constexpr EventTime kGap = 1'000'000;  // one reading a second

// A sum of an AR(1) with persistence phi and variance share c and white noise
// of share 1 - c, of unit variance in all.
std::vector<double> ArPlusNoise(double phi, double c, int n, std::uint64_t seed) {
  Random rng(seed);
  std::vector<double> u(n);
  double s = rng.Normal() * std::sqrt(c);
  for (int i = 0; i < n; ++i) {
    s = phi * s + std::sqrt(c * (1.0 - phi * phi)) * rng.Normal();
    u[i] = s + std::sqrt(1.0 - c) * rng.Normal();
  }
  return u;
}

ResidualWhitener Trained(double phi, double c, std::uint64_t seed) {
  ResidualWhitener w;
  const std::vector<double> u = ArPlusNoise(phi, c, 40000, seed);
  for (int i = 0; i < static_cast<int>(u.size()); ++i) {
    w.Whiten(i * kGap, u[i], kGap, 1.0, true);
  }
  return w;
}

// The moments at one and two gaps give phi = rho2 / rho1 and c = rho1 / phi
// (residual_whitener.h). Tolerances: a few standard errors of the running
// moments over the last ~5000 readings (our own, no source).
TEST(ResidualWhitenerTest, LearnsPersistenceAndSignalShareOfAnArPlusNoise) {
  const ResidualWhitener w = Trained(0.8, 0.5, 11);
  std::printf("[figures] AR(0.8) share 0.5: phi %.3f, c %.3f, lag-1 %.3f\n",
              w.persistence(), w.signal_share(), w.lag1());
  EXPECT_NEAR(w.persistence(), 0.8, 0.06);
  EXPECT_NEAR(w.signal_share(), 0.5, 0.08);
  EXPECT_NEAR(w.lag1(), 0.4, 0.05);
}

// The filter is linear in u once it stops learning, so the difference of two
// copies' outputs, one fed a step of size d on top of the same residuals, is
// d times its step response reading by reading. Its running mean over the
// first n readings must be d * MeanStepResponse(n), and it must settle at
// d * StepResponse().
TEST(ResidualWhitenerTest, MeanStepResponseIsTheFiltersOwnResponseToAStep) {
  for (const auto& [phi, c] :
       {std::pair{0.5, 1.0}, std::pair{0.8, 0.5}, std::pair{0.95, 0.3}}) {
    ResidualWhitener plain = Trained(phi, c, 29);
    const std::vector<double> u = ArPlusNoise(phi, c, 600, 31);
    // Settle the filter's variance without learning, then split.
    for (int i = 0; i < 300; ++i)
      plain.Whiten((40000 + i) * kGap, u[i], kGap, 1.0, false);
    ResidualWhitener stepped = plain;
    const double d = 2.5;
    double sum = 0.0, last = 0.0;
    for (int n = 1; n <= 300; ++n) {
      const EventTime t = (40299 + n) * kGap;
      const double a = plain.Whiten(t, u[300 + n - 1], kGap, 1.0, false);
      const double b = stepped.Whiten(t, u[300 + n - 1] + d, kGap, 1.0, false);
      last = b - a;
      sum += last;
      if (n == 1 || n == 5 || n == 50 || n == 300) {
        EXPECT_NEAR(sum / n, d * plain.MeanStepResponse(n), 1e-9)
            << "phi " << phi << " c " << c << " n " << n;
      }
    }
    EXPECT_NEAR(last, d * plain.StepResponse(), 1e-9) << "phi " << phi << " c " << c;
    // Pure AR(1): the first innovation carries the whole step, 1 / sqrt(1 - phi^2),
    // every later one (1 - phi) / sqrt(1 - phi^2) of it.
    std::printf("[figures] trained on AR(%g) share %g: phi %.3f, c %.3f\n", phi, c,
                plain.persistence(), plain.signal_share());
    if (plain.signal_share() == 1.0) {
      const double p = plain.persistence();
      EXPECT_NEAR(plain.MeanStepResponse(1), 1.0 / std::sqrt(1.0 - p * p), 1e-12);
      EXPECT_NEAR(plain.StepResponse(), (1.0 - p) / std::sqrt(1.0 - p * p), 1e-12);
    }
  }
}

}  // namespace
}  // namespace plumbline
