// ResidualProfile: phase means and spreads, one level and two (a week of days).
// Properties of the empirical-Bayes shrinkage in residual_profile.h (Efron and
// Morris; DerSimonian and Laird; from memory): what every day shares is learned
// from every day; what sets one day of the week apart is learned from that day's
// own bins; bins that differ only by noise stay pooled; a phase that never varies
// gets a spread near zero; with too few bins the fixed prior weight applies.
#include "detectors/residual_profile.h"

#include <gtest/gtest.h>

#include <cmath>
#include <optional>

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

  // The shared 09:00 bump (+2) after three weeks: the daily profile has 21
  // residuals in its bin, the pooled weekly one as many through its phase, the
  // plain weekly one only 3, so it keeps its own estimate's standard error
  // (0.58 of sigma) short of it.
  const double shared_daily = daily.Mean(daily.Bin(at(0, 9)), 1.0);
  const double shared_weekly = weekly.Mean(weekly.Bin(at(0, 9)), 1.0);
  const double shared_plain = weekly_plain.Mean(weekly_plain.Bin(at(0, 9)), 1.0);
  EXPECT_GT(shared_weekly, 0.8 * shared_daily);
  EXPECT_GT(shared_daily, 1.5);
  EXPECT_GT(shared_weekly, shared_plain + 0.3);

  // The odd day's dip: the daily profile spreads it over all days (a seventh),
  // the weekly ones put it on its own day.
  const double odd_weekly = weekly.Mean(weekly.Bin(at(3, 10)), 1.0);
  const double odd_daily = daily.Mean(daily.Bin(at(3, 10)), 1.0);
  const double other_day_weekly = weekly.Mean(weekly.Bin(at(4, 10)), 1.0);
  EXPECT_LT(odd_weekly, 2.0 * odd_daily);  // more than twice as deep
  EXPECT_GT(other_day_weekly,
            0.5 * odd_weekly);  // the other days dip less than half as much
  // Spreads are shrunk toward the phase's pooled spread, all finite and positive.
  for (int h = 0; h < kHoursPerWeek; ++h) {
    const double s = weekly.Sigma(weekly.Bin(at(0, h)), 1.0);
    EXPECT_TRUE(std::isfinite(s) && s > 0) << h;
  }
}

// Residuals at time t (hand-made, no source): noise of sd 0.3; every day +3
// from 02:00 to 02:30 and nothing from 02:30 to 03:00; on the odd day, day 3
// of the week, -2 from 12:00 to 18:00.
double SpikeAndOddDay(EventTime t, Random& random) {
  const EventTime in_day = t % kMicrosPerDay;
  const int day = static_cast<int>((t % (7 * kMicrosPerDay)) / kMicrosPerDay);
  double r = 0.3 * random.Normal();
  if (in_day >= 2 * kMicrosPerHour && in_day < 2 * kMicrosPerHour + 30 * kMicrosPerMinute)
    r += 3.0;
  if (day == 3 && in_day >= 12 * kMicrosPerHour && in_day < 18 * kMicrosPerHour) r -= 2.0;
  return r;
}

// Phase bins narrower than the long ones: a day's shape in half-hour bins,
// each hour of the week's departure from it. SpikeAndOddDay's residuals every
// 10 minutes for four weeks.
TEST(ResidualProfileTest, HalfHourPhasesKeepASharpDailyShapeUnderHourLongWeeklyBins) {
  const EventTime week = 7 * kMicrosPerDay;
  ResidualProfile fine(week, kHoursPerWeek, 4.0, 48, kMicrosPerDay);
  ResidualProfile hourly(week, kHoursPerWeek, 4.0, 24);
  ASSERT_EQ(fine.fold_bins(), 48);
  ASSERT_EQ(fine.fold_period(), kMicrosPerDay);
  ASSERT_EQ(hourly.fold_period(), kMicrosPerDay);
  Random random(9);
  const EventTime step = 10 * kMicrosPerMinute;
  for (EventTime t = step / 2; t < 4 * week; t += step) {
    const double r = SpikeAndOddDay(t, random);
    fine.Update(fine.Bin(t), r, r, 1.0);
    hourly.Update(hourly.Bin(t), r, r, 1.0);
  }
  auto at = [](int day, int hour, int minute) {
    return (day * 24 + hour) * kMicrosPerHour + minute * kMicrosPerMinute;
  };
  for (int day : {0, 3, 5}) {
    EXPECT_NEAR(fine.Mean(fine.Bin(at(day, 2, 10)), 1.0), 3.0, 0.4) << day;
    EXPECT_NEAR(fine.Mean(fine.Bin(at(day, 2, 40)), 1.0), 0.0, 0.4) << day;
    // Hour-wide phases can only give the hour's average to both halves.
    EXPECT_NEAR(hourly.Mean(hourly.Bin(at(day, 2, 10)), 1.0), 1.5, 0.4) << day;
  }
  EXPECT_NEAR(fine.Mean(fine.Bin(at(3, 14, 10)), 1.0), -2.0, 0.4);
  EXPECT_NEAR(fine.Mean(fine.Bin(at(4, 14, 10)), 1.0), 0.0, 0.4);
}

// Readings folded in with long_bins false teach the phase bins, not the long
// ones: SpikeAndOddDay's afternoon 2 below the rest is not learned from them,
// and is from the same readings given with long_bins true (SeriesMonitor holds the
// long bins back until its forecaster has seen a whole week).
TEST(ResidualProfileTest, LongBinsHeldBackLearnOnlyThePhases) {
  const EventTime week = 7 * kMicrosPerDay;
  ResidualProfile held(week, kHoursPerWeek, 4.0, 48, kMicrosPerDay);
  ResidualProfile learning(week, kHoursPerWeek, 4.0, 48, kMicrosPerDay);
  Random random(21);
  const EventTime step = 10 * kMicrosPerMinute;
  for (EventTime t = step / 2; t < 3 * week; t += step) {
    const double r = SpikeAndOddDay(t, random);
    held.Update(held.Bin(t), r, r, 1.0, /*long_bins=*/false);
    learning.Update(learning.Bin(t), r, r, 1.0);
  }
  const EventTime odd_day_2pm = (3 * 24 + 14) * kMicrosPerHour + 10 * kMicrosPerMinute;
  const EventTime day0_2am = 2 * kMicrosPerHour + 10 * kMicrosPerMinute;
  // The daily shape is learned either way.
  EXPECT_NEAR(held.Mean(held.Bin(day0_2am), 1.0), 3.0, 0.4);
  EXPECT_NEAR(learning.Mean(learning.Bin(day0_2am), 1.0), 3.0, 0.4);
  // The odd day's departure only where the long bins learn; held back, the
  // afternoon expects the average day (-2 / 7 from the odd day in it).
  EXPECT_NEAR(learning.Mean(learning.Bin(odd_day_2pm), 1.0), -2.0, 0.4);
  EXPECT_NEAR(held.Mean(held.Bin(odd_day_2pm), 1.0), -2.0 / 7.0, 0.2);
}

// Hourly counts, worked by hand (no source): exactly 3 an hour from 08:00 to
// 16:00 on six days, none on the seventh, while the phases expect 3 at those
// hours every day. Fourteen four-hour bins expect counts, each E = 3 (1 + k +
// k^2 + k^3) = 11.9103 after a week (k = 1 - 1/200, its visits forgotten in
// turn); twelve see all of them, two none. m = 12/14, s^2 = (12 (1 - m)^2 +
// 2 m^2) / 14 = 0.122449, A = s^2 - m / E = 0.0504825, C = A / (A + m / E) =
// 0.412273: the shut day's ratio m (1 - C) = 0.503766, the open days' m + C (1
// - m) = 0.916039. After four weeks (E = 46.2413, C = 0.848620): 0.129754 and
// 0.978374. One week halves the shut day's expectation; each further week
// moves it closer to none.
TEST(ResidualProfileTest, CountsLearnAShutDayWeekByWeek) {
  const EventTime week = 7 * kMicrosPerDay;
  ResidualProfile profile(week, 42, 4.0, 6);
  const EventTime shut_day = 6 * kMicrosPerDay;
  const EventTime ten = 10 * kMicrosPerHour;
  EXPECT_FALSE(profile.CountRatio(profile.Bin(shut_day + ten)).has_value());
  auto feed = [&](int weeks) {
    for (EventTime t = kMicrosPerHour / 2; t < weeks * week; t += kMicrosPerHour) {
      const EventTime in_day = t % kMicrosPerDay;
      const bool open = in_day >= 8 * kMicrosPerHour && in_day < 16 * kMicrosPerHour;
      const double expected = open ? 3.0 : 0.0;
      const bool shut = t % week >= shut_day;
      profile.UpdateCount(profile.Bin(t), shut ? 0.0 : expected, expected);
    }
  };
  auto ratio = [&](EventTime t) { return profile.CountRatio(profile.Bin(t)).value_or(-1); };
  feed(1);
  EXPECT_NEAR(ratio(shut_day + ten), 0.503766, 1e-5);
  for (int day = 0; day < 6; ++day) {
    EXPECT_NEAR(ratio(day * kMicrosPerDay + ten), 0.916039, 1e-5) << day;
  }
  feed(3);
  EXPECT_NEAR(ratio(shut_day + ten), 0.129754, 1e-5);
  EXPECT_NEAR(ratio(2 * kMicrosPerDay + ten), 0.978374, 1e-5);
  // A one-level profile keeps no counts.
  ResidualProfile flat(kMicrosPerDay, 6, 4.0);
  flat.UpdateCount(0, 3.0, 1.0);
  EXPECT_FALSE(flat.CountRatio(0).has_value());
}

// Bins that differ only by noise: their own means scatter by 1 / sqrt(n) of
// sigma, the pooled ones by less (limited translation lets each move at most
// one standard error toward the prior, so not to zero).
TEST(ResidualProfileTest, BinsThatDifferOnlyByNoiseStayPooled) {
  ResidualProfile profile(7 * kMicrosPerDay, kHoursPerWeek, 4.0);
  Random random(11);
  for (int h = 0; h < 3 * kHoursPerWeek; ++h) {
    const double r = random.Normal();
    profile.Update(profile.Bin(h * kMicrosPerHour + 1), r, r, 1.0);
  }
  double means = 0, ratios = 0;
  for (int b = 0; b < profile.bins(); ++b) {
    means += profile.Mean(b, 1.0) * profile.Mean(b, 1.0);
    const double k = profile.Sigma(b, 1.0) * profile.Sigma(b, 1.0) - 1.0;
    ratios += k * k;
  }
  // Own means over 3 readings: root mean square 0.58; own variance ratios: 0.82.
  EXPECT_LT(std::sqrt(means / profile.bins()), 0.5 * 0.58);
  EXPECT_LT(std::sqrt(ratios / profile.bins()), 0.75 * 0.82);
}

// Hourly counts that are zero every night (a closed phase) and vary by day: the
// night bins' spread falls to a fraction of sigma within a week (the fixed prior
// weight of ten readings would leave it at 0.77), the day bins' does not.
TEST(ResidualProfileTest, APhaseThatNeverVariesGetsASpreadNearZero) {
  ResidualProfile profile(kMicrosPerDay, 24, 4.0);
  Random random(3);
  for (int h = 0; h < 7 * 24; ++h) {
    const bool open = h % 24 >= 6 && h % 24 < 18;
    const double r = open ? 2.0 * random.Normal() : 0.0;
    profile.Update(profile.Bin(h * kMicrosPerHour + 1), r, r, 1.0);
  }
  EXPECT_LT(profile.Sigma(profile.Bin(2 * kMicrosPerHour), 1.0), 0.35);
  EXPECT_GT(profile.Sigma(profile.Bin(12 * kMicrosPerHour), 1.0), 1.0);
}

// Three bins (a monthly series' four-month bins) are too few to estimate the
// spread between bins: each keeps the fixed weight e / (e + kPrior).
TEST(ResidualProfileTest, TooFewBinsKeepTheFixedPriorWeight) {
  ResidualProfile profile(kMicrosPerDay, 3, 4.0);
  for (int i = 0; i < 3 * 30; ++i) {
    const int bin = i % 3;
    const double r = bin == 0 ? 1.0 : 0.0;
    profile.Update(bin, r, r, 1.0);
  }
  EXPECT_NEAR(profile.Mean(0, 1.0), 30.0 / (30.0 + ResidualProfile::kPrior), 1e-12);
}

TEST(ResidualProfileTest, FoldThatDoesNotDivideTheBinsFallsBackToOneLevel) {
  const ResidualProfile profile(7 * kMicrosPerDay, 168, 4.0, 25);
  EXPECT_EQ(profile.fold_bins(), 0);
  EXPECT_EQ(profile.Mean(0, 1.0), 0.0);
}

}  // namespace
}  // namespace plumbline
