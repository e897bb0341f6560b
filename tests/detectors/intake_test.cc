// Intake: readings -> observations by kind, `every` bucketing and gap policy.
// Small hand-made inputs with exact expected observations, worked out by hand
// from the rules in detectors/intake.h (common practice, no source: a gauge's
// time-weighted mean, a count's sum, a meter's differences spread evenly over
// their interval are the usual conventions of metering and historian software).
#include "detectors/intake.h"

#include <gtest/gtest.h>

#include <cmath>
#include <optional>
#include <vector>

namespace plumbline {
namespace {

constexpr EventTime kHour = kMicrosPerHour;

// Hours (fractional) to event time, exactly for the quarter-hours used here.
EventTime H(double hours) {
  return static_cast<EventTime>(std::llround(hours * static_cast<double>(kHour)));
}

struct Feeder {
  Feeder(SeriesKind kind, GapPolicy gaps, std::optional<EventTime> every)
      : intake(kind, gaps, every) {}
  void Add(EventTime t, double value) { intake.Add(t, value, &out, &resets); }
  Intake intake;
  std::vector<Observation> out;
  std::vector<MeterReset> resets;
};

// Exact interval, value within 1e-9 relative (sums of a few doubles).
void ExpectObservations(const std::vector<Observation>& got,
                        const std::vector<Observation>& want) {
  ASSERT_EQ(got.size(), want.size());
  for (size_t i = 0; i < want.size(); ++i) {
    SCOPED_TRACE(i);
    EXPECT_EQ(got[i].from, want[i].from);
    EXPECT_EQ(got[i].to, want[i].to);
    EXPECT_NEAR(got[i].value, want[i].value,
                1e-9 * std::max(1.0, std::abs(want[i].value)));
  }
}

double Sum(const std::vector<Observation>& observations) {
  double total = 0.0;
  for (const Observation& o : observations) total += o.value;
  return total;
}

// ---------------------------------------------------------------------------
// Without `every`

TEST(IntakeUnbucketedTest, GaugeReadingsPassThroughAsInstants) {
  Feeder f(SeriesKind::kGauge, GapPolicy::kSkip, std::nullopt);
  f.Add(0, 1.5);
  f.Add(H(0.25), -2.0);
  f.Add(H(5), 7.0);
  ExpectObservations(f.out, {{0, 0, 1.5}, {H(0.25), H(0.25), -2.0}, {H(5), H(5), 7.0}});
  EXPECT_TRUE(f.resets.empty());
}

TEST(IntakeUnbucketedTest, CountReadingsPassThroughAsInstantsWhateverTheGapPolicy) {
  for (GapPolicy gaps : {GapPolicy::kSkip, GapPolicy::kZero, GapPolicy::kHold}) {
    SCOPED_TRACE(std::string(ToString(gaps)));
    Feeder f(SeriesKind::kCount, gaps, std::nullopt);
    f.Add(H(1), 3);
    f.Add(H(1), 4);  // same instant: both kept
    f.Add(H(30), 0);
    ExpectObservations(f.out, {{H(1), H(1), 3}, {H(1), H(1), 4}, {H(30), H(30), 0}});
  }
}

TEST(IntakeUnbucketedTest, MeterDifferencesBecomeMeanRatesPerHourOverTheirInterval) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, std::nullopt);
  f.Add(0, 100.0);  // the first total only sets the baseline
  EXPECT_TRUE(f.out.empty());
  f.Add(H(0.5), 103.0);   // 3 in half an hour: 6 per hour
  f.Add(H(3), 113.0);     // 10 in 2.5 hours: 4 per hour
  f.Add(H(3.25), 113.0);  // nothing used: 0 per hour (not a reset)
  ExpectObservations(f.out,
                     {{0, H(0.5), 6.0}, {H(0.5), H(3), 4.0}, {H(3), H(3.25), 0.0}});
  EXPECT_TRUE(f.resets.empty());
}

TEST(IntakeUnbucketedTest, MeterTotalGoingDownIsAResetWithNoObservationAcrossIt) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, std::nullopt);
  f.Add(0, 100.0);
  f.Add(H(1), 110.0);
  f.Add(H(2), 5.0);  // replaced meter: consumption over [1h, 2h] is unknown
  ASSERT_EQ(f.resets.size(), 1u);
  EXPECT_EQ(f.resets[0].time, H(2));
  EXPECT_EQ(f.resets[0].total_before, 110.0);
  EXPECT_EQ(f.resets[0].total_after, 5.0);
  f.Add(H(4), 9.0);  // differenced from the new total
  ExpectObservations(f.out, {{0, H(1), 10.0}, {H(2), H(4), 2.0}});
}

// ---------------------------------------------------------------------------
// With `every` = 1 hour: counts

TEST(IntakeBucketedTest, CountSumsEachBucketAndDropsTheFirstPartialBucket) {
  Feeder f(SeriesKind::kCount, GapPolicy::kSkip, kHour);
  f.Add(H(0.5), 100);  // first bucket [0, 1h): data start mid-bucket, dropped
  f.Add(H(1.25), 2);
  f.Add(H(1.75), 4);
  EXPECT_TRUE(f.out.empty());  // [1h, 2h) is complete only when a later reading comes
  f.Add(H(2), 1);              // a reading on a boundary belongs to the bucket it starts
  f.Add(H(2.75), 5);
  f.Add(H(3.5), 1);
  ExpectObservations(f.out, {{H(1), H(2), 6}, {H(2), H(3), 6}});
}

// Empty buckets between [1h, 2h) (sum 5) and the reading at 4.5h.
std::vector<Observation> CountAcrossTwoEmptyBuckets(GapPolicy gaps) {
  Feeder f(SeriesKind::kCount, gaps, kHour);
  f.Add(H(0.5), 1);  // partial, dropped
  f.Add(H(1.25), 2);
  f.Add(H(1.5), 3);
  f.Add(H(4.5), 7);
  f.Add(H(5), 0);
  return f.out;
}

TEST(IntakeBucketedTest, EmptyBucketsUnderSkipEmitNothing) {
  ExpectObservations(CountAcrossTwoEmptyBuckets(GapPolicy::kSkip),
                     {{H(1), H(2), 5}, {H(4), H(5), 7}});
}

TEST(IntakeBucketedTest, EmptyBucketsUnderZeroEmitZeroEach) {
  ExpectObservations(
      CountAcrossTwoEmptyBuckets(GapPolicy::kZero),
      {{H(1), H(2), 5}, {H(2), H(3), 0}, {H(3), H(4), 0}, {H(4), H(5), 7}});
}

TEST(IntakeBucketedTest, EmptyBucketsUnderHoldRepeatTheLastBucketsValue) {
  ExpectObservations(
      CountAcrossTwoEmptyBuckets(GapPolicy::kHold),
      {{H(1), H(2), 5}, {H(2), H(3), 5}, {H(3), H(4), 5}, {H(4), H(5), 7}});
}

TEST(IntakeBucketedTest, HoldHasNothingToRepeatBeforeTheFirstCompleteBucket) {
  Feeder f(SeriesKind::kCount, GapPolicy::kHold, kHour);
  f.Add(H(0.5), 1);  // partial, dropped: nothing emitted yet
  f.Add(H(3.5), 2);  // buckets [1h, 3h) empty: nothing to hold
  f.Add(H(4), 0);
  ExpectObservations(f.out, {{H(3), H(4), 2}});
}

TEST(IntakeBucketedTest, AtMostMaxFilledBucketsAreFilledPerGapTheMostRecentOnes) {
  const EventTime second = kMicrosPerSecond;
  Feeder f(SeriesKind::kCount, GapPolicy::kZero, second);
  f.Add(second / 2, 1);                                      // partial, dropped
  f.Add(second + second / 2, 3);                             // bucket 1
  const std::int64_t empty = Intake::kMaxFilledBuckets + 5;  // buckets 2 .. empty + 1
  f.Add((empty + 2) * second + 1, 4);
  ASSERT_EQ(f.out.size(), 1u + Intake::kMaxFilledBuckets);
  EXPECT_EQ(f.out[0].from, second);
  EXPECT_EQ(f.out[0].value, 3);
  EXPECT_EQ(f.out[1].from, 7 * second);  // buckets 2..6 are the 5 left unfilled
  EXPECT_EQ(f.out.back().to, (empty + 2) * second);
  for (size_t i = 1; i < f.out.size(); ++i) {
    ASSERT_EQ(f.out[i].value, 0.0);
    ASSERT_EQ(f.out[i].to - f.out[i].from, second);
  }
  EXPECT_EQ(f.intake.unfilled_buckets(), 5);
}

// ---------------------------------------------------------------------------
// With `every` = 1 hour: gauges

TEST(IntakeBucketedTest, GaugeIsTimeWeightedWithTheLastValueCarriedIntoTheNextBucket) {
  Feeder f(SeriesKind::kGauge, GapPolicy::kSkip, kHour);
  f.Add(H(0), 10);
  f.Add(H(0.25), 20);
  f.Add(H(0.75), 40);
  f.Add(H(1.5), 0);
  f.Add(H(2 + 1.0 / 6), 5);  // 2:10
  f.Add(H(3), 1);
  ExpectObservations(f.out, {
                                // 10 for 15 min, 20 for 30 min, 40 for 15 min.
                                {H(0), H(1), (10 * 15 + 20 * 30 + 40 * 15) / 60.0},
                                // 40 carried over [1h, 1.5h), then 0.
                                {H(1), H(2), (40 * 30 + 0 * 30) / 60.0},
                                // 0 carried over [2h, 2:10), then 5.
                                {H(2), H(3), (0 * 10 + 5 * 50) / 60.0},
                            });
}

// A mean over a bucket's last half hour is not the bucket's mean: dropped.
TEST(IntakeBucketedTest, GaugeFirstBucketNotCoveredFromItsStartIsDropped) {
  Feeder f(SeriesKind::kGauge, GapPolicy::kSkip, kHour);
  f.Add(H(0.5), 10);
  f.Add(H(0.75), 20);
  f.Add(H(1.25), 0);
  f.Add(H(2), 7);
  ExpectObservations(f.out, {{H(1), H(2), (20 * 15 + 0 * 45) / 60.0}});
}

TEST(IntakeBucketedTest, GaugeValueIsNotCarriedAcrossAnEmptyBucketUnderSkip) {
  Feeder f(SeriesKind::kGauge, GapPolicy::kSkip, kHour);
  f.Add(H(0), 10);
  f.Add(H(0.5), 30);
  f.Add(H(2.5), 50);  // [1h, 2h) empty: 30 is not carried into [2h, 2.5h),
  f.Add(H(3), 0);     // so [2h, 3h) is not covered from its start: dropped
  f.Add(H(4), 0);
  ExpectObservations(f.out, {{H(0), H(1), 20}, {H(3), H(4), 0}});
}

TEST(IntakeBucketedTest, GaugeEmptyBucketsUnderZeroAreZeroAndNothingIsCarried) {
  Feeder f(SeriesKind::kGauge, GapPolicy::kZero, kHour);
  f.Add(H(0), 10);
  f.Add(H(0.5), 30);
  f.Add(H(3.25), 50);  // [3h, 4h) is covered from 3:15 only: dropped
  f.Add(H(4), 0);
  ExpectObservations(f.out, {{H(0), H(1), 20}, {H(1), H(2), 0}, {H(2), H(3), 0}});
}

// Under hold a gauge's last reading still holds: an empty bucket's time-weighted
// mean is that reading's value (30), not the mean of the bucket before (20), and
// the same value is carried into the start of the next occupied bucket.
TEST(IntakeBucketedTest, GaugeUnderHoldKeepsTheLastReadingAcrossEmptyBuckets) {
  Feeder f(SeriesKind::kGauge, GapPolicy::kHold, kHour);
  f.Add(H(0), 10);
  f.Add(H(0.5), 30);
  f.Add(H(3.25), 50);
  f.Add(H(4), 0);
  ExpectObservations(f.out, {{H(0), H(1), 20},
                             {H(1), H(2), 30},
                             {H(2), H(3), 30},
                             {H(3), H(4), (30 * 15 + 50 * 45) / 60.0}});
}

// ---------------------------------------------------------------------------
// With `every` = 1 hour: meters

TEST(IntakeBucketedTest, MeterConsumptionIsSpreadEvenlyAndSumsToTheTotalUsed) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, kHour);
  f.Add(H(0), 1000);
  f.Add(H(2.5), 1010);  // 4 per hour over [0, 2.5h)
  f.Add(H(3), 1012);    // 4 per hour over [2.5h, 3h)
  f.Add(H(5.5), 1022);  // 4 per hour over [3h, 5.5h)
  f.Add(H(7), 1030);    // 16/3 per hour over [5.5h, 7h)
  ExpectObservations(f.out, {{H(0), H(1), 4},
                             {H(1), H(2), 4},
                             {H(2), H(3), 2 + 2},
                             {H(3), H(4), 4},
                             {H(4), H(5), 4},
                             {H(5), H(6), 2 + 8.0 / 3},
                             {H(6), H(7), 16.0 / 3}});
  EXPECT_NEAR(Sum(f.out), 1030 - 1000, 1e-9);
}

TEST(IntakeBucketedTest, MeterFirstPartialBucketIsDropped) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, kHour);
  f.Add(H(0.5), 0);
  f.Add(H(2), 6);  // 4 per hour: [0, 1h) would hold only 2
  ExpectObservations(f.out, {{H(1), H(2), 4}});
}

TEST(IntakeBucketedTest, MeterLongIntervalUnderSkipIsOneObservationOverItsWholeLength) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, kHour);
  f.Add(H(0), 0);
  f.Add(H(0.5), 1);    // [0, 1h) open with 1
  f.Add(H(30.5), 61);  // 2 per hour for 30 hours: 31 buckets > kMaxSpreadBuckets
  static_assert(Intake::kMaxSpreadBuckets < 31);
  // Mean per bucket over [0, 30h): (1 + 2 * 29.5) / 30 = 2; [30h, ...) resumes.
  ExpectObservations(f.out, {{H(0), H(30), 2}});
  f.Add(H(31), 62);
  ExpectObservations(f.out, {{H(0), H(30), 2}, {H(30), H(31), 2}});
  // Value x length in buckets sums to the consumption.
  EXPECT_NEAR(f.out[0].value * 30 + f.out[1].value, 62, 1e-9);
}

TEST(IntakeBucketedTest, MeterLongIntervalIsSpreadOverBucketsUnderZeroAndHold) {
  for (GapPolicy gaps : {GapPolicy::kZero, GapPolicy::kHold}) {
    SCOPED_TRACE(std::string(ToString(gaps)));
    Feeder f(SeriesKind::kMeter, gaps, kHour);
    f.Add(H(0), 0);
    f.Add(H(0.5), 1);
    f.Add(H(30.5), 61);
    f.Add(H(31), 62);
    ASSERT_EQ(f.out.size(), 31u);
    for (size_t i = 0; i < f.out.size(); ++i) {
      EXPECT_EQ(f.out[i].from, H(static_cast<double>(i)));
      EXPECT_NEAR(f.out[i].value, 2.0, 1e-9);
    }
  }
}

// Regression: a reading exactly on a bucket boundary closes that bucket; a long
// interval starting there is whole and must not be dropped as if partial.
TEST(IntakeBucketedTest, MeterLongIntervalStartingOnABoundaryIsKept) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, kHour);
  f.Add(H(0), 0);
  f.Add(H(1), 2);    // closes [0, 1h)
  f.Add(H(31), 62);  // 2 per hour over [1h, 31h): 31 buckets spanned
  ExpectObservations(f.out, {{H(0), H(1), 2}, {H(1), H(31), 2}});
}

// Regression: only the incomplete first bucket is dropped, not a whole long
// interval that begins inside it.
TEST(IntakeBucketedTest, MeterLongFirstIntervalDropsOnlyItsPartialFirstBucket) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, kHour);
  f.Add(H(0.5), 0);
  f.Add(H(30.5), 60);  // 2 per hour
  ExpectObservations(f.out, {{H(1), H(30), 2}});
}

TEST(IntakeBucketedTest, MeterResetDropsTheBucketsItCrossesAndStartsAgain) {
  Feeder f(SeriesKind::kMeter, GapPolicy::kSkip, kHour);
  f.Add(H(0), 0);
  f.Add(H(1.5), 3);    // [0, 1h) = 2; [1h, 2h) open with 1
  f.Add(H(2.5), 0.5);  // reset: [1.5h, 2.5h) unknown, so [1h, 2h) and [2h, 3h) incomplete
  f.Add(H(4), 3.5);    // 2 per hour from 2.5h: [3h, 4h) = 2
  ASSERT_EQ(f.resets.size(), 1u);
  EXPECT_EQ(f.resets[0].time, H(2.5));
  ExpectObservations(f.out, {{H(0), H(1), 2}, {H(3), H(4), 2}});
}

// Regression: buckets between the last reading before a reset and the reset
// have unknown consumption; zero and hold must not invent values for them.
TEST(IntakeBucketedTest, MeterResetFillsNoBucketsAcrossItUnderZeroOrHold) {
  for (GapPolicy gaps : {GapPolicy::kSkip, GapPolicy::kZero, GapPolicy::kHold}) {
    SCOPED_TRACE(std::string(ToString(gaps)));
    Feeder f(SeriesKind::kMeter, gaps, kHour);
    f.Add(H(0), 0);
    f.Add(H(1.5), 3);  // [0, 1h) = 2
    f.Add(H(5.5), 1);  // reset, 4 hours after the last total
    f.Add(H(7), 4);    // 2 per hour: [5h, 6h) partial, [6h, 7h) = 2
    ASSERT_EQ(f.resets.size(), 1u);
    ExpectObservations(f.out, {{H(0), H(1), 2}, {H(6), H(7), 2}});
  }
}

TEST(IntakeBucketedTest, MeterResetReadOnABoundaryKeepsTheBucketItStarts) {
  for (GapPolicy gaps : {GapPolicy::kSkip, GapPolicy::kZero, GapPolicy::kHold}) {
    SCOPED_TRACE(std::string(ToString(gaps)));
    Feeder f(SeriesKind::kMeter, gaps, kHour);
    f.Add(H(0), 0);
    f.Add(H(1), 2);  // [0, 1h) = 2, closed
    f.Add(H(3),
          1);  // reset on a boundary: [1h, 3h) unknown, [3h, 4h) covered from its start
    f.Add(H(4), 4);
    ExpectObservations(f.out, {{H(0), H(1), 2}, {H(3), H(4), 3}});
  }
}

// ---------------------------------------------------------------------------
// Times before 1970

TEST(IntakeBucketedTest, BucketsBeforeNineteenSeventyAlignOnFloorBoundaries) {
  Feeder f(SeriesKind::kCount, GapPolicy::kSkip, kHour);
  f.Add(H(-2.5), 1);  // bucket [-3h, -2h): partial, dropped
  f.Add(H(-2), 2);    // exactly on a boundary: bucket [-2h, -1h)
  f.Add(H(-1.25), 3);
  f.Add(H(-1) - 1, 4);  // the last microsecond of [-2h, -1h)
  f.Add(H(-1), 10);     // [-1h, 0)
  f.Add(-1, 20);        // the microsecond before the epoch: still [-1h, 0)
  f.Add(0, 0);          // [0, 1h)
  ExpectObservations(f.out, {{H(-2), H(-1), 2 + 3 + 4}, {H(-1), 0, 30}});
}

TEST(IntakeBucketedTest, GaugeBucketsStraddlingTheEpochAreTimeWeighted) {
  const EventTime width = 7 * kMicrosPerMinute;  // does not divide an hour evenly
  Feeder f(SeriesKind::kGauge, GapPolicy::kSkip, width);
  const EventTime minute = kMicrosPerMinute;
  f.Add(-7 * minute, 1);  // bucket [-7m, 0)
  f.Add(-2 * minute, 8);
  f.Add(3 * minute, 0);  // bucket [0, 7m): 8 carried over [0, 3m)
  f.Add(7 * minute, 0);
  ExpectObservations(f.out, {{-7 * minute, 0, (1 * 5 + 8 * 2) / 7.0},
                             {0, 7 * minute, (8 * 3 + 0 * 4) / 7.0}});
}

}  // namespace
}  // namespace plumbline
