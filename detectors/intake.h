// Intake: turns one series' readings (in time order) into model observations,
// according to what the values mean (SeriesKind), how time is bucketed
// (`every`), and what an empty stretch means (GapPolicy). Not thread-safe;
// owned by the series' monitor.
//
// An observation is a mean over an interval [from, to] (from == to: an instant),
// which the continuous-time forecaster fits exactly (SeasonalForecaster::
// UpdateInterval), so uneven spacing never needs resampling.
//
// Without `every`:
//   gauge, count  each reading is an observation at its own time.
//   meter         the consumption between two readings, as a mean rate per hour
//                 over [t_prev, t]; a total that goes down is a reset or a meter
//                 replacement: a new baseline, reported, never an alert.
//
// With `every` = B, buckets are [k B, (k+1) B) in event time; a bucket is
// complete when a reading at or after its end arrives:
//   gauge   time-weighted mean: each value holds until the next reading (within
//           its bucket and the next; never across an empty bucket unless
//           gaps = hold)
//   count   the sum of the readings' amounts
//   meter   each interval's consumption is spread evenly over it and summed per
//           bucket (an interval longer than kMaxSpreadBuckets buckets under
//           gaps = skip, or than kMaxFilledBuckets buckets under any policy, is
//           one observation over its whole length instead, so a fortnight unread
//           is not turned into flat, made-up buckets)
// A bucket that the data do not cover from its start (the first one; a gauge's
// first after a gap, as its value does not hold across an empty bucket; a
// meter's interrupted by a reset) is incomplete and is dropped, never reported
// as a low value or as a mean of a few minutes; buckets across a meter reset
// are never filled.
// Empty buckets: skip emits nothing; zero emits 0; hold repeats the last
// bucket's value (a gauge's: its last reading, which still holds). At most
// kMaxFilledBuckets are filled per gap.
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/profile.h"

namespace plumbline {

struct Observation {
  EventTime from = 0;
  EventTime to = 0;
  double value = 0.0;
};

struct MeterReset {
  EventTime time = 0;
  double total_before = 0.0;
  double total_after = 0.0;
};

class Intake {
 public:
  static constexpr int kMaxSpreadBuckets = 24;
  static constexpr int kMaxFilledBuckets = 10000;

  Intake(SeriesKind kind, GapPolicy gaps, std::optional<EventTime> every);

  // Adds a reading at t >= the previous reading's time. Completed observations
  // are appended to *out; a meter reset is appended to *resets.
  void Add(EventTime t, double value, std::vector<Observation>* out,
           std::vector<MeterReset>* resets);

  // Empty buckets skipped because a gap was longer than kMaxFilledBuckets.
  std::int64_t unfilled_buckets() const { return unfilled_; }
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

 private:
  EventTime BucketStart(EventTime t) const;
  void AddBucketed(EventTime t, double value, std::vector<Observation>* out);
  void AddMeterBucketed(EventTime from, EventTime to, double consumption,
                        std::vector<Observation>* out);
  void CloseBucketsBefore(EventTime t, std::vector<Observation>* out);
  void Emit(EventTime bucket, double value, std::vector<Observation>* out);
  void FillEmpty(EventTime from_bucket, EventTime to_bucket, std::vector<Observation>* out);

  SeriesKind kind_;
  GapPolicy gaps_;
  std::optional<EventTime> every_;

  bool has_reading_ = false;
  EventTime last_time_ = 0;
  double last_value_ = 0.0;         // last reading (gauge value or meter total)

  // The open bucket.
  bool bucket_open_ = false;
  EventTime bucket_ = 0;            // start of the open bucket
  double sum_ = 0.0;                // count: amounts; meter: consumption; gauge: integral
  double covered_ = 0.0;            // gauge: microseconds covered by holds
  bool partial_ = false;            // count/meter: the open bucket is not fully covered
  bool has_emitted_ = false;
  EventTime last_emitted_bucket_ = 0;
  double last_emitted_value_ = 0.0;
  std::int64_t unfilled_ = 0;
};

}  // namespace plumbline
