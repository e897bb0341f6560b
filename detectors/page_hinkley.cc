#include "detectors/page_hinkley.h"

#include <algorithm>
#include <cassert>
#include <cmath>
#include <cstdio>

#include "detectors/option_checks.h"

namespace plumbline {

using option_checks::Fail;
using option_checks::Format;
using option_checks::RefuseReading;
using option_checks::Arl0IsValid;

bool PageHinkleyOptions::IsValid(std::string* why) const {
  if (!(std::isfinite(delta) && delta >= 0.0)) {
    return Fail(why, "delta must be finite and >= 0; got " + Format(delta));
  }
  if (!(std::isfinite(lambda) && lambda > 0.0)) {
    return Fail(why, "lambda must be finite and > 0; got " + Format(lambda));
  }
  if (!(alpha > 0.0 && alpha <= 1.0)) {
    return Fail(why, "alpha must be in (0, 1]; got " + Format(alpha));
  }
  if (!std::isfinite(mean)) {
    return Fail(why, "mean must be a finite number; got " + Format(mean));
  }
  return Arl0IsValid(arl0, why);
}

StatusOr<PageHinkley> PageHinkley::Create(const PageHinkleyOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("page-hinkley: " + why);
  return PageHinkley(options);
}

PageHinkley::PageHinkley(const PageHinkleyOptions& options)
    : options_(options), alpha_minus_one_(options.alpha - 1.0) {
  assert(options.IsValid(nullptr));
  Reset();
}

void PageHinkley::Restart() {
  up_ = Side();
  down_ = Side();
  sum_x_ = 0.0;
  reference_mean_ = options_.mean;
  readings_ = 0;
}

void PageHinkley::Reset() {
  Restart();
  alarms_ = 0;
}

double PageHinkley::MeanSince(const Side& side) const {
  return (sum_x_ - side.sum_x_before) / static_cast<double>(readings_ - side.count_before);
}

double PageHinkley::ShiftEstimate(const Side& side) const {
  const double after = MeanSince(side);
  const double before = (options_.use_running_mean && side.count_before > 0)
                            ? side.sum_x_before / static_cast<double>(side.count_before)
                            : options_.mean;
  return after - before;
}

StatusOr<Alarm> PageHinkley::Update(double x, EventTime time) {
  if (!std::isfinite(x)) [[unlikely]] {
    return RefuseReading(x);
  }
  const double sum_x_before = sum_x_;
  const std::int64_t count_before = readings_;
  ++readings_;
  sum_x_ += x;
  reference_mean_ =
      options_.use_running_mean ? sum_x_ / static_cast<double>(readings_) : options_.mean;
  const double deviation = x - reference_mean_;  // x_T - xbar_T
  up_.Step(deviation - options_.delta, alpha_minus_one_, time, sum_x_before,
           count_before);
  down_.Step(-deviation - options_.delta, alpha_minus_one_, time, sum_x_before,
             count_before);
  Alarm alarm;
  alarm.statistic = std::max(up_.statistic, down_.statistic);
  if (alarm.statistic > options_.lambda) [[unlikely]] {
    const bool up = up_.statistic >= down_.statistic;
    const Side& side = up ? up_ : down_;
    alarm.fired = true;
    alarm.direction = up ? Direction::kUp : Direction::kDown;
    alarm.change_at = side.start;
    alarm.length = side.length;
    alarm.shift = ShiftEstimate(side);
    alarm.input_mean = MeanSince(side);
    ++alarms_;
    Restart();
  }
  return alarm;
}

void PageHinkley::Save(SnapshotWriter& w) const {
  w.Tag("PAGE");
  for (const Side* s : {&up_, &down_}) {
    w.F64(s->sum);
    w.F64(s->statistic);
    w.I64(s->length);
    w.I64(s->start);
    w.F64(s->sum_x_before);
    w.I64(s->count_before);
  }
  w.F64(sum_x_);
  w.F64(reference_mean_);
  w.I64(readings_);
  w.I64(alarms_);
}

Status PageHinkley::Load(SnapshotReader& r) {
  r.Tag("PAGE");
  for (Side* s : {&up_, &down_}) {
    s->sum = r.Finite("page-hinkley sum");
    s->statistic = r.Finite("page-hinkley statistic");
    s->length = r.Counter("page-hinkley run length");
    s->start = r.Time("page-hinkley start");
    s->sum_x_before = r.Finite("page-hinkley sum before");
    s->count_before = r.Counter("page-hinkley count before");
  }
  sum_x_ = r.Finite("page-hinkley sum of readings");
  reference_mean_ = r.Finite("page-hinkley reference mean");
  readings_ = r.Counter("page-hinkley readings");
  alarms_ = r.Counter("page-hinkley alarms");
  if (r.ok() && (up_.count_before > readings_ || down_.count_before > readings_)) {
    return r.Fail("page-hinkley count before exceeds its readings");
  }
  return r.status();
}

}  // namespace plumbline
