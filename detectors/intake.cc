#include "detectors/intake.h"

#include <algorithm>

namespace plumbline {

Intake::Intake(SeriesKind kind, GapPolicy gaps, std::optional<EventTime> every)
    : kind_(kind), gaps_(gaps), every_(every) {}

EventTime Intake::BucketStart(EventTime t) const {
  const EventTime width = *every_;
  EventTime k = t / width;
  if (t % width != 0 && t < 0) --k;  // floor for times before 1970
  return k * width;
}

void Intake::Add(EventTime t, double value, std::vector<Observation>* out,
                 std::vector<MeterReset>* resets) {
  if (kind_ == SeriesKind::kMeter) {
    if (has_reading_ && value < last_value_) {
      resets->push_back({t, last_value_, value});
      // The interval across a reset has unknown consumption: start again
      // from the new total.
      if (every_) {
        // The open bucket lost the consumption across the reset, and the
        // buckets between it and the reset have none known: drop them all,
        // fill none (zero or hold would invent values). The reset's bucket is
        // complete only if the new total was read at its start.
        bucket_open_ = true;
        bucket_ = BucketStart(t);
        sum_ = 0.0;
        partial_ = t > bucket_;
      }
    } else if (has_reading_ && t > last_time_) {
      const double consumption = value - last_value_;
      if (every_) {
        AddMeterBucketed(last_time_, t, consumption, out);
      } else {
        const double hours = ToSeconds(t - last_time_) / 3600.0;
        out->push_back({last_time_, t, consumption / hours});
      }
    }
    has_reading_ = true;
    last_time_ = t;
    last_value_ = value;
    return;
  }
  if (!every_) {
    out->push_back({t, t, value});
    has_reading_ = true;
    last_time_ = t;
    last_value_ = value;
    return;
  }
  AddBucketed(t, value, out);
}

void Intake::Emit(EventTime bucket, double value, std::vector<Observation>* out) {
  out->push_back({bucket, bucket + *every_, value});
  has_emitted_ = true;
  last_emitted_bucket_ = bucket;
  last_emitted_value_ = value;
}

void Intake::FillEmpty(EventTime from_bucket, EventTime to_bucket,
                       std::vector<Observation>* out) {
  // Buckets in [from_bucket, to_bucket) had no reading at all.
  if (from_bucket >= to_bucket || gaps_ == GapPolicy::kSkip) return;
  if (gaps_ == GapPolicy::kHold && !has_emitted_) return;
  const EventTime width = *every_;
  const std::int64_t count = (to_bucket - from_bucket) / width;
  const std::int64_t filled = std::min<std::int64_t>(count, kMaxFilledBuckets);
  unfilled_ += count - filled;
  const EventTime first = to_bucket - filled * width;  // fill the most recent ones
  // Hold: a gauge's last reading still holds, so it is each empty bucket's
  // time-weighted mean; a count repeats its last bucket's sum.
  const double value = gaps_ == GapPolicy::kZero   ? 0.0
                       : kind_ == SeriesKind::kGauge ? last_value_
                                                     : last_emitted_value_;
  for (EventTime b = first; b < to_bucket; b += width) Emit(b, value, out);
}

void Intake::CloseBucketsBefore(EventTime t_bucket, std::vector<Observation>* out) {
  // Completes the open bucket (if it is before t_bucket) and fills the empty
  // buckets between it and t_bucket.
  if (!bucket_open_) return;
  if (bucket_ >= t_bucket) return;
  const EventTime width = *every_;
  const EventTime bucket_end = bucket_ + width;
  if (kind_ == SeriesKind::kGauge) {
    // The last value holds to the end of its bucket.
    const EventTime hold_from = std::max(last_time_, bucket_);
    sum_ += last_value_ * static_cast<double>(bucket_end - hold_from);
    covered_ += static_cast<double>(bucket_end - hold_from);
    // Only a bucket covered from its start: a mean over its last minutes
    // would be compared with the forecast's mean over the whole bucket, and
    // averages fewer readings than the others (the first bucket after a gap
    // would look like a change).
    if (covered_ >= static_cast<double>(width)) Emit(bucket_, sum_ / covered_, out);
  } else if (!partial_) {
    Emit(bucket_, sum_, out);
  }
  partial_ = false;
  FillEmpty(bucket_end, t_bucket, out);
  bucket_open_ = false;
}

void Intake::AddBucketed(EventTime t, double value, std::vector<Observation>* out) {
  const EventTime bucket = BucketStart(t);
  const bool continuing = bucket_open_ && bucket == bucket_;
  if (!continuing) {
    const EventTime previous_bucket = bucket_;
    const bool adjacent = bucket_open_ && previous_bucket + *every_ == bucket;
    if (bucket_open_) {
      CloseBucketsBefore(bucket, out);
    } else if (has_emitted_) {
      FillEmpty(last_emitted_bucket_ + *every_, bucket, out);
    }
    bucket_open_ = true;
    bucket_ = bucket;
    sum_ = 0.0;
    covered_ = 0.0;
    partial_ = !has_reading_ && kind_ == SeriesKind::kCount;  // data start mid-bucket
    // A gauge's previous value carries into the start of the next bucket
    // (and, under hold, into any bucket).
    if (kind_ == SeriesKind::kGauge && has_reading_ &&
        (adjacent || gaps_ == GapPolicy::kHold)) {
      sum_ += last_value_ * static_cast<double>(t - bucket);
      covered_ += static_cast<double>(t - bucket);
    }
  } else if (kind_ == SeriesKind::kGauge) {
    sum_ += last_value_ * static_cast<double>(t - last_time_);
    covered_ += static_cast<double>(t - last_time_);
  }
  if (kind_ == SeriesKind::kCount) sum_ += value;
  has_reading_ = true;
  last_time_ = t;
  last_value_ = value;
}

void Intake::AddMeterBucketed(EventTime from, EventTime to, double consumption,
                              std::vector<Observation>* out) {
  const EventTime width = *every_;
  const EventTime first = BucketStart(from);
  const EventTime last = BucketStart(to);
  const std::int64_t spanned = (last - first) / width + 1;
  const double rate = consumption / static_cast<double>(to - from);  // per microsecond
  if ((gaps_ == GapPolicy::kSkip && spanned > kMaxSpreadBuckets) ||
      spanned > kMaxFilledBuckets) {
    // One long interval: the open bucket and every whole bucket up to the one
    // holding `to` become a single observation (a mean per bucket width over
    // its length), and bucketing resumes in the bucket holding `to`.
    // It starts at the open bucket if that is complete, at `from` if `from` is
    // a boundary (the bucket before was closed there), else one bucket later:
    // an incomplete first bucket is dropped alone, not the whole interval.
    EventTime long_from = first + width;
    double long_sum = rate * static_cast<double>(last - long_from);
    if (bucket_open_ && !partial_) {
      long_from = bucket_;
      long_sum = sum_ + rate * static_cast<double>(last - from);
    } else if (!bucket_open_ && from == first) {
      long_from = first;
      long_sum = rate * static_cast<double>(last - from);
    }
    if (last > long_from) {
      const double buckets = static_cast<double>(last - long_from) / static_cast<double>(width);
      out->push_back({long_from, last, long_sum / buckets});
      has_emitted_ = true;
      last_emitted_bucket_ = last - width;
      last_emitted_value_ = long_sum / buckets;
    }
    bucket_open_ = true;
    bucket_ = last;
    sum_ = rate * static_cast<double>(to - last);
    partial_ = false;
    return;
  }
  EventTime cursor = from;
  while (cursor < to) {
    const EventTime bucket = BucketStart(cursor);
    if (!bucket_open_ || bucket != bucket_) {
      const bool first_bucket = !bucket_open_;
      if (bucket_open_) CloseBucketsBefore(bucket, out);
      bucket_open_ = true;
      bucket_ = bucket;
      sum_ = 0.0;
      // The first reading's bucket is covered only from that reading on.
      partial_ = first_bucket && cursor > bucket;
    }
    const EventTime end = std::min(to, bucket + width);
    sum_ += rate * static_cast<double>(end - cursor);
    cursor = end;
  }
  // A reading exactly on a boundary completes the bucket before it.
  if (BucketStart(to) != bucket_) CloseBucketsBefore(BucketStart(to), out);
}

void Intake::Save(SnapshotWriter& w) const {
  w.Tag("INTK");
  w.Bool(has_reading_);
  w.I64(last_time_);
  w.F64(last_value_);
  w.Bool(bucket_open_);
  w.I64(bucket_);
  w.F64(sum_);
  w.F64(covered_);
  w.Bool(partial_);
  w.Bool(has_emitted_);
  w.I64(last_emitted_bucket_);
  w.F64(last_emitted_value_);
  w.I64(unfilled_);
}

Status Intake::Load(SnapshotReader& r) {
  r.Tag("INTK");
  has_reading_ = r.Bool();
  last_time_ = r.Time("intake last time");
  last_value_ = r.Finite("intake last value");
  bucket_open_ = r.Bool();
  bucket_ = r.Time("intake bucket");
  sum_ = r.Finite("intake bucket sum");
  covered_ = r.NonNegative("intake bucket coverage");
  partial_ = r.Bool();
  has_emitted_ = r.Bool();
  last_emitted_bucket_ = r.Time("intake last emitted bucket");
  last_emitted_value_ = r.Finite("intake last emitted value");
  unfilled_ = r.Counter("intake unfilled buckets");
  if (!r.ok()) return r.status();
  // Buckets start on multiples of the width; filling and closing step by it.
  if (every_ && ((bucket_open_ && BucketStart(bucket_) != bucket_) ||
                 (has_emitted_ && BucketStart(last_emitted_bucket_) != last_emitted_bucket_))) {
    return r.Fail("intake bucket is not on a bucket boundary");
  }
  return r.status();
}

}  // namespace plumbline
