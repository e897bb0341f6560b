#include "detectors/status.h"

#include <gtest/gtest.h>

#include "detectors/detection.h"
#include "detectors/random.h"

namespace plumbline {
namespace {

TEST(StatusTest, DefaultIsOkAndErrorsCarryCodeAndMessage) {
  EXPECT_TRUE(Status().ok());
  const Status bad = Status::InvalidArgument("k must be > 0");
  EXPECT_FALSE(bad.ok());
  EXPECT_EQ(bad.code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(bad.ToString(), "invalid argument: k must be > 0");
}

TEST(StatusTest, StatusOrHoldsValueOrReason) {
  StatusOr<int> good = 7;
  ASSERT_TRUE(good.ok());
  EXPECT_EQ(*good, 7);
  StatusOr<int> bad = Status::OutOfRange("too big");
  EXPECT_FALSE(bad.ok());
  EXPECT_EQ(bad.status().message(), "too big");
  StatusOr<int> misuse = Status::Ok();
  EXPECT_FALSE(misuse.ok());
}

TEST(DirectionTest, RoundTripsThroughText) {
  for (Direction d : {Direction::kUp, Direction::kDown, Direction::kNone}) {
    EXPECT_EQ(DirectionFromString(ToString(d)), d);
  }
  EXPECT_FALSE(DirectionFromString("sideways").has_value());
}

// Common practice, no source: moments of the generator's output.
TEST(RandomTest, NormalHasUnitMomentsAndSeedsRepeat) {
  Random a(42), b(42);
  double sum = 0, sum_sq = 0;
  const int n = 200000;
  for (int i = 0; i < n; ++i) {
    const double x = a.Normal();
    EXPECT_EQ(x, b.Normal());
    sum += x;
    sum_sq += x * x;
  }
  EXPECT_NEAR(sum / n, 0.0, 0.01);
  EXPECT_NEAR(sum_sq / n, 1.0, 0.01);
}

TEST(RandomTest, PoissonAndExponentialHaveTheirMeans) {
  Random rng(7);
  double p = 0, e = 0;
  const int n = 200000;
  for (int i = 0; i < n; ++i) {
    p += static_cast<double>(rng.Poisson(45.0));
    e += rng.Exponential(2.0);
  }
  EXPECT_NEAR(p / n, 45.0, 0.1);
  EXPECT_NEAR(e / n, 2.0, 0.02);
}

}  // namespace
}  // namespace plumbline
