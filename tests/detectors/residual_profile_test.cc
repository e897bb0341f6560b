// ResidualProfile: phase means and spreads, one level and two (a week of days).
// Properties of the shrinkage rules in residual_profile.h (common practice, no
// source): what every day shares is learned from every day; what sets one day of
// the week apart is learned as that day's bins fill.
#include "detectors/residual_profile.h"

#include <gtest/gtest.h>

#include <cmath>

#include "detectors/random.h"

namespace plumbline {
namespace {

constexpr int kHoursPerWeek = 168;

// Hourly residuals: +2 every day at 09:00, and -3 on one day of the week at
// 10:00 (Sundays, say, when the forecaster's smooth terms expect a working day).
double Pattern(int hour_of_week) {
  const int hour = hour_of_week % 24;
  const int day = hour_of_week / 24;
  double r = 0.0;
  if (hour == 9) r += 2.0;
  if (day == 3 && hour == 10) r -= 3.0;
  return r;
}

ResidualProfile Learn(int fold_bins, int bins, EventTime period, int weeks) {
  ResidualProfile profile(period, bins, 4.0, fold_bins);
  Random random(5);
  for (int h = 0; h < weeks * kHoursPerWeek; ++h) {
    const EventTime t = h * kMicrosPerHour + kMicrosPerHour / 2;
    const double r = Pattern(h % kHoursPerWeek) + 0.3 * random.Normal();
    profile.Update(profile.Bin(t), r, r, 1.0);
  }
  return profile;
}

TEST(ResidualProfileTest,
     TwoLevelsLearnTheSharedHourFromEveryDayAndTheOddDayFromItsOwnBins) {
  const EventTime week = 7 * kMicrosPerDay;
  const ResidualProfile daily = Learn(0, 24, kMicrosPerDay, 3);
  const ResidualProfile weekly = Learn(24, kHoursPerWeek, week, 3);
  const ResidualProfile weekly_plain = Learn(0, kHoursPerWeek, week, 3);
  ASSERT_EQ(weekly.fold_bins(), 24);
  ASSERT_EQ(weekly_plain.fold_bins(), 0);
  auto at = [](int day, int hour) { return (day * 24 + hour) * kMicrosPerHour + 1; };

  // The shared 09:00 bump after three weeks: the daily profile has 21
  // residuals in its bin (21 / 31 of the way), the pooled weekly one nearly as
  // much through its phase, the plain weekly one only 3 (3 / 13).
  const double shared_daily = daily.Mean(daily.Bin(at(0, 9)));
  const double shared_weekly = weekly.Mean(weekly.Bin(at(0, 9)));
  const double shared_plain = weekly_plain.Mean(weekly_plain.Bin(at(0, 9)));
  EXPECT_GT(shared_weekly, 0.8 * shared_daily);
  EXPECT_GT(shared_weekly, 2.0 * shared_plain);

  // The odd day's dip: the daily profile spreads it over all days (a seventh),
  // the weekly ones put it on its own day.
  const double odd_weekly = weekly.Mean(weekly.Bin(at(3, 10)));
  const double odd_daily = daily.Mean(daily.Bin(at(3, 10)));
  const double other_day_weekly = weekly.Mean(weekly.Bin(at(4, 10)));
  EXPECT_LT(odd_weekly, 2.0 * odd_daily);  // more than twice as deep
  EXPECT_GT(other_day_weekly,
            0.5 * odd_weekly);  // the other days dip less than half as much
  // Spreads are shrunk toward the phase's pooled spread, all finite and positive.
  for (int b = 0; b < weekly.bins(); ++b) {
    const double s = weekly.Sigma(b, 1.0);
    EXPECT_TRUE(std::isfinite(s) && s > 0) << b;
  }
}

TEST(ResidualProfileTest, FoldThatDoesNotDivideTheBinsFallsBackToOneLevel) {
  const ResidualProfile profile(7 * kMicrosPerDay, 168, 4.0, 25);
  EXPECT_EQ(profile.fold_bins(), 0);
  EXPECT_EQ(profile.Mean(0), 0.0);
}

}  // namespace
}  // namespace plumbline
