#include "detectors/arrival_model.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>

#include "detectors/calibration_memo.h"
#include "detectors/prefetch.h"
#include "detectors/run_length_chain.h"

namespace plumbline {
namespace {
constexpr double kSlowerReference = ArrivalModelOptions::kSlowerReference;
constexpr double kFasterReference = ArrivalModelOptions::kFasterReference;
}  // namespace

bool ArrivalModelOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (warmup < 3 || warmup > 1000000)
    return fail("arrival warmup must be in [3, 1000000] gaps");
  if (window < 10 || window > 10000000)
    return fail("arrival window must be in [10, 10000000] gaps");
  if (!(slower_h > 0) || !(faster_h > 0))
    return fail("arrival decision intervals must be > 0");
  if (!(gap_cap > 2.0 * std::numbers::ln2))
    return fail("arrival gap_cap must be > 2 ln 2");
  if (season < 0) return fail("arrival season must be zero or a positive duration");
  if (season_bins < 1 || season_bins > 1000)
    return fail("arrival season_bins must be in [1, 1000]");
  if (season > 0 && season / season_bins < 1)
    return fail("arrival season_bins too many for the season");
  if (season_fold_bins < 0 ||
      (season_fold_bins > 0 && season_bins % season_fold_bins != 0)) {
    return fail("arrival season_fold_bins must be 0 or divide season_bins");
  }
  if (shape_memory < 0) return fail("arrival shape_memory must be zero or positive");
  return true;
}

namespace {

StatusOr<ArrivalModelOptions> CalibrateArrivalModel(double arl0) {
  ArrivalModelOptions options;
  // Increment of the slower side: X - 2 ln 2, X ~ Exp(1).
  const double cap = options.gap_cap;
  auto slower_cdf = [cap](double y) {
    const double x = y + kSlowerReference;
    if (x >= cap) return 1.0;
    return x <= 0 ? 0.0 : 1.0 - std::exp(-x);
  };
  // Increment of the faster side: ln 2 - X.
  auto faster_cdf = [cap](double y) {
    const double x = kFasterReference - y;  // P(ln2 - X <= y) = P(X >= ln2 - y)
    if (x > cap) return 0.0;
    return x <= 0 ? 1.0 : std::exp(-x);
  };
  auto slower = CalibrateOneSidedCusum(slower_cdf, 2.0 * arl0);
  if (!slower.ok()) return slower.status();
  auto faster = CalibrateOneSidedCusum(faster_cdf, 2.0 * arl0);
  if (!faster.ok()) return faster.status();
  options.slower_h = *slower;
  options.faster_h = *faster;
  return options;
}

}  // namespace

StatusOr<ArrivalModelOptions> ArrivalModelOptions::Calibrated(double arl0) {
  static CalibrationMemo<ArrivalModelOptions> memo;
  return memo.Get(arl0, [arl0] { return CalibrateArrivalModel(arl0); });
}

ArrivalShape::ArrivalShape(EventTime period, int bins, EventTime memory, int fold_bins)
    : period_(period),
      width_(period / bins),
      memory_(static_cast<double>(memory > 0 ? memory : 4 * period)),
      fold_bins_(fold_bins > 0 && fold_bins < bins && bins % fold_bins == 0 ? fold_bins
                                                                            : 0),
      events_(static_cast<size_t>(bins), 0.0f),
      exposure_(static_cast<size_t>(bins), 0.0f),
      p_(static_cast<size_t>(bins), 1.0) {}

int ArrivalShape::Bin(EventTime t) const {
  EventTime within = t % period_;
  if (within < 0) within += period_;
  return std::min(static_cast<int>(within / width_), static_cast<int>(p_.size()) - 1);
}

EventTime ArrivalShape::BinEnd(EventTime t, int bin) const {
  EventTime within = t % period_;
  if (within < 0) within += period_;
  const bool last =
      bin + 1 == static_cast<int>(p_.size());  // takes the period's remainder
  return t - within + (last ? period_ : (bin + 1) * width_);
}

void ArrivalShape::Prefetch(EventTime t) const {
  const size_t b = static_cast<size_t>(Bin(t));
  __builtin_prefetch(&events_[b]);
  __builtin_prefetch(&exposure_[b]);
  __builtin_prefetch(&p_[b]);
}

void ArrivalShape::AddExposure(EventTime from, EventTime to, double weight) {
  const EventTime length = to - from;
  // Whole seasons add to every bin alike.
  const EventTime whole = std::min<EventTime>(length / period_, kMaxPeriods);
  if (whole > 0) {
    const double add = weight * static_cast<double>(whole * width_);
    for (float& x : exposure_) x = static_cast<float>(x + add);
    from = to - (length % period_);
  }
  for (EventTime cursor = from; cursor < to;) {
    const int b = Bin(cursor);
    const EventTime bin_end = BinEnd(cursor, b);
    const EventTime end = std::min(to, bin_end);
    float& x = exposure_[static_cast<size_t>(b)];
    x = static_cast<float>(x + weight * static_cast<double>(end - cursor));
    cursor = end;
  }
}

void ArrivalShape::Record(EventTime from, EventTime to) {
  if (to < from) return;
  if (!anchored_) {
    anchor_ = from;
    anchored_ = true;
  }
  // Forgetting by growing weights: a contribution at t weighs exp((t - anchor)/memory);
  // only ratios are used, so the common factor never needs applying.
  double weight = std::exp(static_cast<double>(to - anchor_) / memory_);
  if (weight > kMaxWeight) {
    Rescale(weight);
    anchor_ = to;
    weight = 1.0;
  }
  weight_ = weight;
  AddExposure(from, to, weight);
  float& events = events_[static_cast<size_t>(Bin(to))];
  events = static_cast<float>(events + weight);
  exposure_total_ += static_cast<double>(to - from);
  // The shape moves slowly (it forgets over several seasons), so it is
  // re-derived every kRefreshEvery arrivals rather than at each one: the
  // derivation walks every bin.
  // Until a whole season is seen the shape is not used (p = 1), so nothing is
  // derived before that.
  if (learned() && (++records_since_refresh_ >= kRefreshEvery || !refreshed_once_)) {
    Refresh();
    records_since_refresh_ = 0;
    refreshed_once_ = true;
  }
}

void ArrivalShape::Rescale(double factor) {
  for (float& e : events_) e = static_cast<float>(e / factor);
  for (float& x : exposure_) x = static_cast<float>(x / factor);
}

void ArrivalShape::Refresh() {
  double events = 0, exposure = 0;
  for (size_t b = 0; b < p_.size(); ++b) {
    events += events_[b];
    exposure += exposure_[b];
  }
  if (events <= 0 || exposure <= 0) return;
  const double rate = events / exposure;
  // kShapePrior pseudo-events at the mean rate, weighted like a new event.
  const double prior_events = kShapePrior * weight_;
  const double prior_exposure = prior_events / rate;
  // With two levels, each bin's prior rate is its phase's pooled rate. The
  // tables are shared by every shape on this thread (a series' state would
  // otherwise carry two tables it only needs while refreshing).
  thread_local std::vector<double> parent, parent_events;
  if (fold_bins_ > 0) {
    const size_t fold = static_cast<size_t>(fold_bins_);
    parent.assign(fold, 0.0);
    parent_events.assign(fold, 0.0);
    for (size_t b = 0; b < p_.size(); ++b) {
      parent_events[b % fold] += events_[b];
      parent[b % fold] += exposure_[b];
    }
    for (size_t j = 0; j < fold; ++j) {
      parent[j] = (parent_events[j] + prior_events) / (parent[j] + prior_exposure);
    }
  }
  // Each bin's rate is computed twice, for the mean and then for p, so that p
  // is rounded to single precision once and no scratch of doubles is kept.
  const auto raw = [&](size_t b) {
    const double prior_rate =
        fold_bins_ > 0 ? parent[b % static_cast<size_t>(fold_bins_)] : rate;
    return (events_[b] + prior_exposure * prior_rate) / (exposure_[b] + prior_exposure);
  };
  double sum = 0;
  for (size_t b = 0; b < p_.size(); ++b) sum += raw(b);
  const double mean = sum / static_cast<double>(p_.size());
  for (size_t b = 0; b < p_.size(); ++b) p_[b] = static_cast<float>(raw(b) / mean);
}

double ArrivalShape::Operational(EventTime from, EventTime to) const {
  if (!learned() || to <= from)
    return static_cast<double>(std::max<EventTime>(to - from, 0));
  const EventTime length = to - from;
  double total = static_cast<double>((length / period_) * period_);  // p averages 1
  from = to - (length % period_);
  for (EventTime cursor = from; cursor < to;) {
    const int b = Bin(cursor);
    const EventTime bin_end = BinEnd(cursor, b);
    const EventTime end = std::min(to, bin_end);
    total += p_[static_cast<size_t>(b)] * static_cast<double>(end - cursor);
    cursor = end;
  }
  return total;
}

EventTime ArrivalShape::WallTimeAfter(EventTime from, double operational) const {
  if (!learned()) return from + static_cast<EventTime>(operational);
  EventTime cursor = from;
  const EventTime limit = from + kMaxPeriods * period_;
  while (cursor < limit) {
    const int b = Bin(cursor);
    const EventTime bin_end = BinEnd(cursor, b);
    const double rate = p_[static_cast<size_t>(b)];
    const double available = rate * static_cast<double>(bin_end - cursor);
    if (available >= operational && rate > 0) {
      return cursor + static_cast<EventTime>(operational / rate);
    }
    operational -= available;
    cursor = bin_end;
  }
  return limit;
}

ArrivalModel::ArrivalModel(const ArrivalModelOptions& options) : options_(options) {
  if (options.season > 0) {
    shape_.emplace(options.season, options.season_bins, options.shape_memory,
                   options.season_fold_bins);
  }
}

Alarm ArrivalModel::Observe(EventTime t) {
  Alarm alarm;
  ++arrivals_;
  if (arrivals_ == 1) {
    last_ = t;
    return alarm;
  }
  const EventTime previous = last_;
  const double gap = shape_ ? shape_->Operational(previous, std::max(t, previous))
                            : static_cast<double>(std::max<EventTime>(t - previous, 0));
  // A gap of more than gap_cap mean gaps is a silence: it says nothing about
  // when readings usually come, so it does not teach the shape.
  if (shape_ && !(theta_ > 0 && gap > options_.gap_cap * theta_)) {
    shape_->Record(previous, std::max(t, previous));
  }
  last_ = t;
  ++gaps_;
  if (gaps_ <= options_.warmup) {
    theta_ += (gap - theta_) / static_cast<double>(gaps_);
    used_ = gaps_;
    return alarm;
  }
  if (theta_ <= 0) {  // all gaps so far were zero: nothing to scale by yet
    theta_ = gap;
    used_ = 1;
    return alarm;
  }
  // Self-starting transform: theta is the mean of n earlier gaps, so for a
  // Poisson stream P(gap / theta > r) = (1 + r/n)^-n exactly, and
  // x = n ln(1 + r/n) is Exp(1) whatever n is.
  const double n = static_cast<double>(std::min<long long>(used_, options_.window));
  const double x = std::min(n * std::log1p(gap / theta_ / n), options_.gap_cap);
  if (slower_ == 0) slower_start_ = t;
  if (faster_ == 0) faster_start_ = t;
  slower_ = std::max(0.0, slower_ + x - kSlowerReference);
  faster_ = std::max(0.0, faster_ + kFasterReference - x);
  last_score_ = armed() ? x : std::numeric_limits<double>::quiet_NaN();
  if (!armed()) {  // the shape is still being learned: keep the score at rest
    slower_ = faster_ = 0.0;
  } else if (slower_ > options_.slower_h) {
    alarm = {true, Direction::kDown, slower_start_, 0.0, slower_};
  } else if (faster_ > options_.faster_h) {
    alarm = {true, Direction::kUp, faster_start_, 0.0, faster_};
  }
  // Every gap joins the baseline (capped, so a silence cannot drag it), which
  // keeps the successive x independent; see the header.
  ++used_;
  theta_ += (std::min(gap, options_.gap_cap * theta_) - theta_) /
            static_cast<double>(std::min<long long>(used_, options_.window));
  return alarm;
}

EventTime ArrivalModel::NextArrivalQuantile(double q) const {
  q = std::clamp(q, 1e-9, 1.0 - 1e-9);
  const double operational = theta_ * -std::log1p(-q);
  if (shape_) return shape_->WallTimeAfter(last_, operational);
  return last_ + static_cast<EventTime>(operational);
}

void ArrivalModel::Prefetch(EventTime t) const {
  if (!shape_) return;
  shape_->Prefetch(last_);
  shape_->Prefetch(t);
}

EventTime ArrivalModel::TimeAfterMeanGaps(EventTime from, double mean_gaps) const {
  const double operational = theta_ * mean_gaps;
  if (shape_) return shape_->WallTimeAfter(from, operational);
  return from + static_cast<EventTime>(operational);
}

void ArrivalModel::SetDecisionIntervals(double slower_h, double faster_h) {
  if (slower_h > 0) options_.slower_h = slower_h;
  if (faster_h > 0) options_.faster_h = faster_h;
}

void ArrivalModel::Rebaseline() {
  slower_ = faster_ = 0.0;
  gaps_ = used_ = 0;
  theta_ = 0.0;
}

void ArrivalShape::Save(SnapshotWriter& w) const {
  w.Tag("SHAP");
  w.FloatVector(events_);
  w.FloatVector(exposure_);
  w.FloatVector(p_);
  w.F64(exposure_total_);
  w.I64(anchor_);
  w.F64(weight_);
  w.I64(records_since_refresh_);
  w.Bool(refreshed_once_);
  w.Bool(anchored_);
}

Status ArrivalShape::Load(SnapshotReader& r) {
  r.Tag("SHAP");
  const std::size_t bins = p_.size();
  const std::vector<double> events = r.DoubleVector();
  const std::vector<double> exposure = r.DoubleVector();
  const std::vector<double> p = r.DoubleVector();
  if (r.ok() && (events.size() != bins || exposure.size() != bins || p.size() != bins)) {
    return r.Fail("arrival shape bins differ");
  }
  exposure_total_ = r.NonNegative("arrival exposure");
  anchor_ = r.Time("arrival anchor");
  weight_ = r.NonNegative("arrival weight");
  if (!r.ok()) return r.status();
  // Tables saved in double precision (before they were single) carry weights
  // up to 1e100: rescaled as Record would, to the latest weight, and the anchor
  // moved to where the weight is 1 again.
  const double scale = weight_ > kMaxWeight ? weight_ : 1.0;
  const auto single = [](const std::vector<double>& from, double scale,
                         std::vector<float>* to) {
    for (double v : from) {
      if (!(v >= 0 && v / scale <= std::numeric_limits<float>::max())) return false;
    }
    to->resize(from.size());
    for (std::size_t b = 0; b < from.size(); ++b)
      (*to)[b] = static_cast<float>(from[b] / scale);
    return true;
  };
  if (!single(events, scale, &events_) || !single(exposure, scale, &exposure_)) {
    return r.Fail("arrival shape table out of range");
  }
  // Relative intensities are single precision: finite, >= 0 and within it.
  if (!single(p, 1.0, &p_)) return r.Fail("arrival shape intensity out of range");
  if (scale > 1.0) {
    anchor_ += static_cast<EventTime>(std::llround(memory_ * std::log(scale)));
    weight_ = 1.0;
  }
  const std::int64_t records = r.Counter("arrival records since refresh");
  if (r.ok() && records > std::numeric_limits<int>::max()) {
    return r.Fail("arrival records since refresh too many");
  }
  records_since_refresh_ = static_cast<int>(records);
  refreshed_once_ = r.Bool();
  anchored_ = r.Bool();
  return r.status();
}

void ArrivalModel::Save(SnapshotWriter& w) const {
  w.Tag("ARRV");
  w.F64(options_.slower_h);
  w.F64(options_.faster_h);
  w.F64(theta_);
  w.I64(gaps_);
  w.I64(used_);
  w.I64(arrivals_);
  w.I64(last_);
  w.F64(slower_);
  w.F64(faster_);
  w.I64(slower_start_);
  w.I64(faster_start_);
  w.F64(last_score_);
  w.Bool(shape_.has_value());
  if (shape_) shape_->Save(w);
}

Status ArrivalModel::Load(SnapshotReader& r) {
  r.Tag("ARRV");
  options_.slower_h = r.NonNegative("arrival slower threshold");
  options_.faster_h = r.NonNegative("arrival faster threshold");
  theta_ = r.NonNegative("arrival mean gap");
  gaps_ = r.Counter("arrival gaps");
  used_ = r.Counter("arrival gaps used");
  arrivals_ = r.Counter("arrival arrivals");
  last_ = r.Time("arrival last time");
  slower_ = r.Finite("arrival slower statistic");
  faster_ = r.Finite("arrival faster statistic");
  slower_start_ = r.Time("arrival slower start");
  faster_start_ = r.Time("arrival faster start");
  last_score_ = r.F64();  // NaN until armed
  if (r.Bool() != shape_.has_value()) return r.Fail("arrival season differs");
  if (shape_) return shape_->Load(r);
  return r.status();
}

}  // namespace plumbline
