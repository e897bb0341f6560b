#include "detectors/cusum.h"

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
using option_checks::DecisionIntervalIsValid;

bool CusumOptions::IsValid(std::string* why) const {
  if (!(std::isfinite(k) && k > 0.0)) {
    return Fail(why, "k must be finite and > 0; got " + Format(k));
  }
  return DecisionIntervalIsValid(h, headstart, why) && Arl0IsValid(arl0, why);
}

bool OneSidedCusumOptions::IsValid(std::string* why) const {
  if (!std::isfinite(k)) {
    return Fail(why, "k must be a finite number; got " + Format(k));
  }
  return DecisionIntervalIsValid(h, headstart, why) && Arl0IsValid(arl0, why);
}

// ---------------------------------------------------------------------------
// Cusum

StatusOr<Cusum> Cusum::Create(const CusumOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("cusum: " + why);
  return Cusum(options);
}

Cusum::Cusum(const CusumOptions& options) : options_(options) {
  assert(options.IsValid(nullptr));
  Reset();
}

void Cusum::Restart() {
  upper_.Restart(options_.headstart);
  lower_.Restart(options_.headstart);
  readings_ = 0;
}

void Cusum::Reset() {
  Restart();
  alarms_ = 0;
}

StatusOr<Alarm> Cusum::Update(double x, EventTime time) {
  if (!std::isfinite(x)) [[unlikely]] {
    return RefuseReading(x);
  }
  ++readings_;
  upper_.Step(x - options_.k, time);
  lower_.Step(-x - options_.k, time);
  Alarm alarm;
  alarm.statistic = std::max(upper_.value, lower_.value);
  if (alarm.statistic > options_.h) [[unlikely]] {
    // Only one side can cross at a time (see the header).
    const bool up = upper_.value > options_.h;
    const cusum_internal::Side& side = up ? upper_ : lower_;
    const double excursion_mean =
        options_.k + (side.value - side.origin) / static_cast<double>(side.length);
    alarm.fired = true;
    alarm.direction = up ? Direction::kUp : Direction::kDown;
    alarm.change_at = side.start;
    alarm.length = side.length;
    alarm.shift = up ? excursion_mean : -excursion_mean;
    alarm.input_mean = alarm.shift;
    ++alarms_;
    Restart();
  }
  return alarm;
}

// ---------------------------------------------------------------------------
// OneSidedCusum

StatusOr<OneSidedCusum> OneSidedCusum::Create(const OneSidedCusumOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) {
    return Status::InvalidArgument("one-sided cusum: " + why);
  }
  return OneSidedCusum(options);
}

OneSidedCusum::OneSidedCusum(const OneSidedCusumOptions& options) : options_(options) {
  assert(options.IsValid(nullptr));
  Reset();
}

void OneSidedCusum::Reset() {
  side_.Restart(options_.headstart);
  readings_ = 0;
  alarms_ = 0;
}

StatusOr<Alarm> OneSidedCusum::Update(double x, EventTime time) {
  if (!std::isfinite(x)) [[unlikely]] {
    return RefuseReading(x);
  }
  ++readings_;
  side_.Step(x - options_.k, time);
  Alarm alarm;
  alarm.statistic = side_.value;
  if (side_.value > options_.h) [[unlikely]] {
    alarm.fired = true;
    alarm.direction = Direction::kUp;
    alarm.change_at = side_.start;
    alarm.length = side_.length;
    alarm.shift =
        options_.k + (side_.value - side_.origin) / static_cast<double>(side_.length);
    alarm.input_mean = alarm.shift;
    ++alarms_;
    side_.Restart(options_.headstart);
    readings_ = 0;
  }
  return alarm;
}

namespace {
void SaveSide(const cusum_internal::Side& s, SnapshotWriter& w) {
  w.F64(s.value);
  w.F64(s.origin);
  w.I64(s.length);
  w.I64(s.start);
}
void LoadSide(cusum_internal::Side* s, SnapshotReader& r) {
  s->value = r.Finite("cusum statistic");
  s->origin = r.Finite("cusum origin");
  s->length = r.Counter("cusum run length");
  s->start = r.Time("cusum start");
}
}  // namespace

void Cusum::Save(SnapshotWriter& w) const {
  w.Tag("CUSM");
  SaveSide(upper_, w);
  SaveSide(lower_, w);
  w.I64(readings_);
  w.I64(alarms_);
}

Status Cusum::Load(SnapshotReader& r) {
  r.Tag("CUSM");
  LoadSide(&upper_, r);
  LoadSide(&lower_, r);
  readings_ = r.Counter("cusum readings");
  alarms_ = r.Counter("cusum alarms");
  return r.status();
}

}  // namespace plumbline
