#include "detectors/series_monitor.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>

#include "detectors/prefetch.h"
#include "detectors/run_length_chain.h"

namespace plumbline {
namespace {

// Trust order for the change-time estimate when several detectors agree:
// CUSUM's last-zero estimate is the maximum-likelihood change point for a
// step of the designed size (Page 1954; Hinkley 1971); Page-Hinkley's is the
// same argument with a running mean; BOCPD's and EWMA's are coarser.
int Trust(DetectorKind kind) {
  switch (kind) {
    case DetectorKind::kCusum:
      return 0;
    case DetectorKind::kPageHinkley:
      return 1;
    case DetectorKind::kBocpd:
      return 2;
    case DetectorKind::kEwma:
      return 3;
  }
  return 4;
}

std::uint32_t Bit(DetectorKind kind) { return 1u << static_cast<int>(kind); }

// How far each detector's statistic is toward its threshold, in [0, 1+).
double ThresholdFraction(const Cusum& d) {
  return std::max(d.upper(), d.lower()) / d.options().h;
}
double ThresholdFraction(const PageHinkley& d) {
  return std::max(d.up_statistic(), d.down_statistic()) / d.options().lambda;
}
double ThresholdFraction(const Ewma& d) {
  const double limit = d.limit();
  return limit > 0 ? std::abs(d.value()) / limit : 0.0;
}
double ThresholdFraction(const Bocpd&) { return 0.0; }  // a probability, not a drift
double ThresholdFraction(const PoissonCusum& d) {
  const PoissonCusumOptions& o = d.options();
  return std::max(d.upper() / o.h, d.lower() / o.h_down);
}

}  // namespace

std::string_view ToString(AlertKind kind) {
  switch (kind) {
    case AlertKind::kLevel:
      return "level";
    case AlertKind::kVariance:
      return "variance";
    case AlertKind::kRate:
      return "rate";
    case AlertKind::kSilence:
      return "silence";
  }
  return "level";
}

std::optional<AlertKind> AlertKindFromString(std::string_view text) {
  for (AlertKind k :
       {AlertKind::kLevel, AlertKind::kVariance, AlertKind::kRate, AlertKind::kSilence}) {
    if (ToString(k) == text) return k;
  }
  return std::nullopt;
}

std::string_view ToString(EventType type) {
  switch (type) {
    case EventType::kAlert:
      return "alert";
    case EventType::kResume:
      return "resume";
    case EventType::kRetrain:
      return "retrain";
    case EventType::kMeterReset:
      return "meter-reset";
    case EventType::kSuppressed:
      return "suppressed";
  }
  return "alert";
}

StatusOr<ProfileDesign> ProfileDesign::Make(const ProfileOptions& profile) {
  std::string why;
  if (!profile.IsValid(&why)) return Status::InvalidArgument(why);
  ProfileDesign design;
  design.profile = profile;
  auto level = DesignDetectors(2.0 * profile.arl0, profile.shift, profile.detectors,
                               profile.agree);
  if (!level.ok()) return level.status();
  design.level = *level;
  auto variance = VarianceCusumOptions::Calibrated(4.0 * profile.arl0);
  if (!variance.ok()) return variance.status();
  design.variance = *variance;
  auto arrival = ArrivalModelOptions::Calibrated(4.0 * profile.arl0);
  if (!arrival.ok()) return arrival.status();
  design.arrival = *arrival;
  design.arrival.warmup = std::max(3, std::min(profile.warmup, 50));
  // Arrivals follow the longest season up to a month (a yearly season tells
  // nothing about when today's readings come), in bins of at least an hour
  // for weekly seasons and 15 minutes for shorter ones, at most 168.
  for (EventTime period : profile.seasons) {
    if (period <= 31 * kMicrosPerDay && period > design.arrival.season) {
      design.arrival.season = period;
    }
  }
  if (design.arrival.season > 0) {
    const EventTime slice =
        design.arrival.season > kMicrosPerDay ? kMicrosPerHour : 15 * kMicrosPerMinute;
    design.arrival.season_bins =
        static_cast<int>(std::clamp<EventTime>(design.arrival.season / slice, 1, 168));
    // A shorter season that divides it into whole bins (a day in a week) pools
    // the shape's bins by their phase in that season.
    for (EventTime period : profile.seasons) {
      if (period >= design.arrival.season || design.arrival.season % period != 0)
        continue;
      const EventTime repeats = design.arrival.season / period;
      if (design.arrival.season_bins % repeats != 0) continue;
      const int fold = static_cast<int>(design.arrival.season_bins / repeats);
      if (fold >= 2)
        design.arrival.season_fold_bins = std::max(design.arrival.season_fold_bins, fold);
    }
  }

  design.forecaster.seasons = profile.seasons;
  design.forecaster.trend = profile.trend;
  for (size_t i = 0; i < profile.seasons.size(); ++i) {
    design.forecaster.harmonics.push_back(
        profile.harmonics.empty()
            ? SeasonalForecasterOptions::DefaultHarmonics(profile.seasons[i])
            : profile.harmonics[i]);
  }
  if (profile.memory) design.forecaster.memory = *profile.memory;
  design.forecaster.covariates = static_cast<int>(profile.covariates.size());
  // Counts move in whole units: a residual spread below the spread of a
  // uniform rounding error (1/sqrt(12)) is not resolvable, so it is the floor.
  if (profile.kind == SeriesKind::kCount) design.scale.floor = 1.0 / std::sqrt(12.0);
  if (!design.forecaster.IsValid(&why)) return Status::InvalidArgument(why);
  return design;
}

SeriesMonitor::SeriesMonitor(const ProfileDesign* design)
    : design_(design),
      scale_(design->scale),
      arrival_(design->arrival),
      variance_(design->variance),
      intake_(design->profile.kind, design->profile.gaps, design->profile.every),
      level_sample_(-kLevelClip, kLevelClip),
      variance_sample_(0.0, design->variance.cap),
      arrival_sample_(0.0, design->arrival.gap_cap) {
  BuildLevelDetectors(design->level);
  firings_.resize(level_.size());
  threshold_fraction_.assign(level_.size(), 0.0);
}

void SeriesMonitor::Prefetch(EventTime t) const {
  PrefetchRange(reinterpret_cast<const char*>(this), sizeof(*this));
  if (forecaster_) forecaster_->Prefetch();
  if (profile_) profile_->Prefetch(profile_->Bin(t));
  arrival_.Prefetch(t);
  if (!level_.empty()) PrefetchRange(level_.data(), sizeof(LevelDetector) * level_.size());
}

std::optional<EventTime> SeriesMonitor::silence_deadline() const {
  if (!has_reading_ || silent_) return std::nullopt;
  if (design_->profile.silence_after)
    return last_reading_ + *design_->profile.silence_after;
  if (!arrival_.armed() || arrival_.mean_gap() <= 0) return std::nullopt;
  // Adaptive: max(5, ln(4 arl0)) mean gaps of operational time (see the header).
  const double multiple = std::max(5.0, std::log(4.0 * design_->profile.arl0));
  return std::max(arrival_.TimeAfterMeanGaps(last_reading_, multiple), last_reading_ + 1);
}

void SeriesMonitor::AdvanceClock(EventTime now, std::vector<SeriesEvent>* events) {
  const auto deadline = silence_deadline();
  if (!deadline || now < *deadline) return;
  const std::size_t first = events->size();
  silent_ = true;
  SeriesEvent e;
  e.type = EventType::kAlert;
  e.kind = AlertKind::kSilence;
  e.direction = Direction::kNone;
  e.detected_at = *deadline;
  e.change_at = last_reading_;
  e.magnitude = ToSeconds(*deadline - last_reading_);
  events->push_back(e);
  Annotate(events, first);
}

ReadingVerdict SeriesMonitor::Observe(EventTime t, double value,
                                      std::vector<SeriesEvent>* events) {
  if (!std::isfinite(value)) return ReadingVerdict::kNotFinite;
  const std::size_t first = events->size();
  const EventTime lateness = design_->profile.lateness;
  if (t < released_ || (newest_ != INT64_MIN && t < newest_ - lateness)) {
    return ReadingVerdict::kLate;
  }
  // Silence is about the stream, so it is timed from the newest reading
  // received, not from the last one the reorder buffer has released.
  if (silent_) {
    silent_ = false;
    SeriesEvent e;
    e.type = EventType::kResume;
    e.kind = AlertKind::kSilence;
    e.detected_at = t;
    e.change_at = last_reading_;
    e.magnitude = ToSeconds(t - last_reading_);
    events->push_back(e);
  }
  last_reading_ = has_reading_ ? std::max(last_reading_, t) : t;
  has_reading_ = true;
  if (lateness == 0) {
    newest_ = released_ = t;
    Process(t, value, events);
    Annotate(events, first);
    return ReadingVerdict::kAccepted;
  }
  pending_.emplace_back(t, value);
  std::push_heap(pending_.begin(), pending_.end(),
                 [](const auto& a, const auto& b) { return a.first > b.first; });
  newest_ = std::max(newest_, t);
  while (!pending_.empty() && pending_.front().first <= newest_ - lateness) {
    std::pop_heap(pending_.begin(), pending_.end(),
                  [](const auto& a, const auto& b) { return a.first > b.first; });
    const auto [time, v] = pending_.back();
    pending_.pop_back();
    released_ = time;
    Process(time, v, events);
  }
  Annotate(events, first);
  return ReadingVerdict::kAccepted;
}

void SeriesMonitor::Flush(std::vector<SeriesEvent>* events) {
  const std::size_t first = events->size();
  std::sort(pending_.begin(), pending_.end());
  for (const auto& [time, v] : pending_) {
    released_ = time;
    Process(time, v, events);
  }
  pending_.clear();
  Annotate(events, first);
}

void SeriesMonitor::SetAnnotations(std::vector<Annotation> annotations) {
  planned_.clear();
  maintenance_.clear();
  for (Annotation& a : annotations) {
    if (!a.IsValid(nullptr)) continue;
    (a.kind == AnnotationKind::kPlannedChange ? planned_ : maintenance_)
        .push_back(std::move(a));
  }
  std::stable_sort(planned_.begin(), planned_.end(),
                   [](const Annotation& a, const Annotation& b) { return a.at < b.at; });
  // Changes already behind the series are history, not news.
  next_planned_ = 0;
  while (next_planned_ < planned_.size() && has_reading_ &&
         planned_[next_planned_].at <= released_) {
    ++next_planned_;
  }
}

void SeriesMonitor::Annotate(std::vector<SeriesEvent>* events, std::size_t first) const {
  if (planned_.empty() && maintenance_.empty()) return;
  for (std::size_t i = first; i < events->size(); ++i) {
    SeriesEvent& e = (*events)[i];
    if (e.type != EventType::kAlert) continue;
    bool held = false;
    for (const Annotation& m : maintenance_) {
      if (e.detected_at >= m.from && e.detected_at < m.to) {
        e.type = EventType::kSuppressed;
        e.annotation = m.id;
        held = true;
        break;
      }
    }
    if (held || e.kind == AlertKind::kSilence) continue;
    for (const Annotation& p : planned_) {
      const EventTime distance =
          e.change_at > p.at ? e.change_at - p.at : p.at - e.change_at;
      if (distance <= p.within &&
          (p.direction == Direction::kNone || p.direction == e.direction)) {
        e.annotation = p.id;
        break;
      }
    }
  }
}

bool SeriesMonitor::Unlearned(EventTime t) const {
  for (const Annotation& m : maintenance_) {
    if (!m.learn && t >= m.from && t < m.to) return true;
  }
  return false;
}

void SeriesMonitor::ApplyPlannedChange(const Annotation& change) {
  if (forecaster_) forecaster_->Reopen(kReopenVariance);
  settled_ = false;  // the reopened model has its coefficients to learn again
  if (profile_) profile_->Reset();
  ResetLevelDetectors();
  variance_.Reset();
  const long long wait = std::max<long long>(design_->profile.warmup, SettlingReadings());
  level_hold_until_ = std::max(level_hold_until_, observations_ + wait);
  variance_hold_until_ = std::max(variance_hold_until_, observations_ + wait);
  refit_hold_until_ = std::max(refit_hold_until_, observations_ + wait);
  regime_start_ = change.at;
  regime_observations_ = 0;
}

void SeriesMonitor::Process(EventTime t, double value, std::vector<SeriesEvent>* events) {
  const double gap_before = arrival_.mean_gap();
  const Alarm rate = arrival_.Observe(t);
  CollectForRefit(std::numeric_limits<double>::quiet_NaN(), arrival_.last_score());
  // A count bucketed with gaps = zero carries its arrival rate in its values
  // (events per bucket), where the level detectors, with any covariates, watch
  // it: a rate alert would repeat a level alert, or contradict a covariate
  // that explains it. Its arrivals still time its silence.
  const ProfileOptions& profile = design_->profile;
  const bool rate_in_values = profile.kind == SeriesKind::kCount && profile.every &&
                              profile.gaps == GapPolicy::kZero;
  if (rate.fired) {
    if (!rate_in_values && arrival_.arrivals() >= rate_hold_until_) {
      SeriesEvent e;
      e.kind = AlertKind::kRate;
      e.direction = rate.direction;
      e.detected_at = t;
      e.change_at = rate.change_at;
      e.before = ToSeconds(static_cast<EventTime>(gap_before));
      events->push_back(e);
      rate_hold_until_ = arrival_.arrivals() + design_->arrival.warmup;
    }
    arrival_.Rebaseline();
  }

  observations_scratch_.clear();
  resets_scratch_.clear();
  intake_.Add(t, value, &observations_scratch_, &resets_scratch_);
  for (const MeterReset& reset : resets_scratch_) {
    SeriesEvent e;
    e.type = EventType::kMeterReset;
    e.detected_at = e.change_at = reset.time;
    e.before = reset.total_before;
    e.after = reset.total_after;
    events->push_back(e);
  }
  for (const Observation& o : observations_scratch_) {
    const long long before = observations_;
    Model(o.from, o.to, o.value, events);
    if (listener_ && observations_ != before) listener_->Observed(*this, o.from, o.to, o.value);
  }
}

void SeriesMonitor::ConnectCovariates(const CovariateSource* source, CovariateSink* sink,
                                      std::string name) {
  covariate_source_ = source;
  covariate_sink_ = sink;
  name_ = std::move(name);
}

void SeriesMonitor::JoinCovariates(EventTime t) {
  const std::vector<std::string>& names = design_->profile.covariates;
  covariate_values_.resize(names.size(), 0.0);
  covariate_means_.resize(names.size(), 0.0);
  covariate_counts_.resize(names.size(), 0);
  for (std::size_t k = 0; k < names.size(); ++k) {
    const std::optional<double> value =
        covariate_source_ ? covariate_source_->ValueAsOf(names[k], t,
                                                         design_->profile.covariate_max_age)
                          : std::nullopt;
    if (value && std::isfinite(*value)) {
      // Running mean over the last ~kCovariateWindow joined values: what a
      // stale covariate stands in with.
      ++covariate_counts_[k];
      covariate_means_[k] +=
          (*value - covariate_means_[k]) /
          static_cast<double>(std::min<long long>(covariate_counts_[k], kCovariateWindow));
      covariate_values_[k] = *value;
    } else {
      covariate_values_[k] = covariate_means_[k];
    }
  }
}

void SeriesMonitor::SetCovariates(const double* values) {
  if (design_->forecaster.covariates == 0) return;
  if (forecaster_) forecaster_->SetCovariates(values);
  for (RivalForecaster& rival : rivals_) rival.forecaster.SetCovariates(values);
}

void SeriesMonitor::StartForecaster() {
  SeasonalForecasterOptions options = design_->forecaster;
  double spacing = 0;  // mean spacing of the held observations
  if (probe_.size() >= 2) {
    spacing = static_cast<double>(probe_.back().to - probe_.front().to) /
              static_cast<double>(probe_.size() - 1);
  }
  if (!design_->profile.memory) {
    EventTime longest = 0;
    for (EventTime period : options.seasons) longest = std::max(longest, period);
    options.memory = std::max<EventTime>(
        {4 * longest, static_cast<EventTime>(100.0 * spacing), kMicrosPerHour});
  }
  options.level_noise =
      design_->profile.level_noise_auto ? 0.0 : design_->profile.level_noise;
  forecaster_.emplace(options);
  rivals_.clear();
  for (double q : kLevelNoiseGrid) {
    if (!design_->profile.level_noise_auto) break;
    if (q == options.level_noise) continue;
    SeasonalForecasterOptions rival = options;
    rival.level_noise = q;
    rivals_.push_back({SeasonalForecaster(rival), {}});
  }
  // Level noise is measured per mean spacing, so q means the same for minute
  // and monthly data.
  const EventTime unit = std::max<EventTime>(1, static_cast<EventTime>(spacing));
  forecaster_->SetLevelNoiseUnit(unit);
  for (RivalForecaster& rival : rivals_) rival.forecaster.SetLevelNoiseUnit(unit);
  // Phase bins over the shortest season, about four readings wide, at most 48.
  EventTime shortest = 0;
  for (EventTime period : options.seasons) {
    if (shortest == 0 || period < shortest) shortest = period;
  }
  int bins = 1;
  if (shortest > 0 && spacing > 0) {
    bins = static_cast<int>(std::clamp(static_cast<double>(shortest) / (4.0 * spacing),
                                       1.0, static_cast<double>(kMaxPhaseBins)));
  }
  // With a longer season of up to a week that repeats the shortest a whole
  // number of times (a week of days, a day of 8-hour defrost cycles), the
  // profile spans it, its bins pooled by their phase in the shortest season
  // (residual_profile.h): the additive seasonal terms cannot switch one day's
  // pattern off, the profile can. At most kMaxLongPhaseBins long bins: where
  // the phase bins repeated would be more, the long bins are wider, each
  // spanning a whole number of phase bins (a week of 5-minute readings: a
  // day's shape in half-hour bins, each weekday's departure from it by the hour).
  EventTime profile_period = shortest > 0 ? shortest : kMicrosPerDay;
  int per_repeat = 0;
  if (shortest > 0 && spacing > 0) {
    for (EventTime period : options.seasons) {
      if (period <= shortest || period > 7 * kMicrosPerDay || period % shortest != 0)
        continue;
      const int repeats = static_cast<int>(period / shortest);
      const int widened = std::min(bins, kMaxLongPhaseBins / repeats);
      if (widened < 1) continue;
      if (period > profile_period) {
        profile_period = period;
        per_repeat = widened;
      }
    }
  }
  // Long bins as narrow as the cap allows (coarser ones, say 80 minutes for
  // a week of 10-minute readings, give more false alarms in the synthetic
  // trials); the phase bins then a whole number of them each, rounded up from
  // about four readings wide where room is left (36 -> 48 a day), else down.
  if (per_repeat > 0 && bins % per_repeat != 0) {
    const int up = per_repeat * (bins / per_repeat + 1);
    bins = up <= kMaxPhaseBins ? up : per_repeat * (bins / per_repeat);
  }
  if (per_repeat > 0) {
    profile_.emplace(profile_period, per_repeat * static_cast<int>(profile_period / shortest),
                     design_->scale.clip, bins, shortest);
  } else {
    profile_.emplace(profile_period, bins, design_->scale.clip);
  }
  std::vector<HeldObservation> held;
  held.swap(probe_);
  for (const HeldObservation& h : held) {
    SetCovariates(h.covariates.data());
    if (h.from < h.to) {
      (void)forecaster_->UpdateInterval(h.from, h.to, h.y);
    } else {
      (void)forecaster_->Update(h.to, h.y);
    }
    ScoreRivals(h.from, h.to, h.y);
  }
}

void SeriesMonitor::ForecastScore::Add(double error, double variance_factor) {
  // Each candidate's standardised errors are whitened by an AR(1) fitted to its
  // own earlier errors, as the pipeline whitens the leader's: errors that are
  // merely autocorrelated (a shape the harmonics miss) must not pass for a
  // wandering level.
  const double u = error / std::sqrt(1.0 + variance_factor);
  double whitened = u;
  if (count > 0) {
    const double phi = square > 0 ? std::clamp(cross / square, -kMaxPhi, kMaxPhi) : 0.0;
    whitened = u - phi * previous;
    cross += u * previous;
    square += previous * previous;
  }
  previous = u;
  scaled_squares += whitened * whitened;
  log_spreads += std::log1p(variance_factor);
  ++count;
}

double SeriesMonitor::ForecastScore::Criterion(bool extra_parameter) const {
  // A forecaster with level noise must beat the plain one by a likelihood-ratio
  // test at the 1% level (chi-square, 1 degree of freedom: 6.63), not merely by
  // Akaike's 2: on short warmups a wandering level fits the start-up transient
  // better by chance, and a level that wanders absorbs the shifts the detectors
  // are there to find (the threshold is common practice, no source).
  const double penalty = extra_parameter ? kLevelNoisePenalty : 0.0;
  // Too little evidence: the plain forecaster stays.
  if (count < kMinScores)
    return extra_parameter ? std::numeric_limits<double>::infinity() : 0.0;
  const double n = static_cast<double>(count);
  // The prediction-error decomposition of the Gaussian likelihood with the
  // noise variance concentrated out (Harvey 1989, section 3.4; MEM).
  return n * std::log(std::max(scaled_squares / n, 1e-300)) + log_spreads + penalty;
}

void SeriesMonitor::ScoreRivals(EventTime from, EventTime to, double y) {
  for (RivalForecaster& rival : rivals_) {
    SeasonalForecaster& f = rival.forecaster;
    const bool scored = f.updates() >= kScoreAfterDimensions * f.dimension();
    const StatusOr<Forecast> begun = f.BeginUpdate(from, to);
    if (!begun.ok()) continue;
    if (scored) rival.score.Add(y - begun->value, begun->parameter_variance_factor);
    (void)f.CommitUpdate(y);
  }
}

double SeriesMonitor::PhaseSigma(int bin) const {
  return Floored(profile_->Sigma(bin, scale_.sigma()));
}

int SeriesMonitor::PhaseBin(EventTime from, EventTime to) const {
  return profile_->Bin(from + (to - from) / 2);
}

double SeriesMonitor::PhaseSigmaOver(EventTime from, EventTime to) const {
  if (!profile_) return 0.0;
  return PhaseSigma(PhaseBin(from, to));
}

double SeriesMonitor::Floored(double phase_sigma) const {
  // A phase whose residuals never vary (a count that is zero every night) has a
  // spread near zero in the profile; the series' resolution floors it.
  return std::max(phase_sigma, design_->scale.floor);
}

void SeriesMonitor::Model(EventTime from, EventTime to, double y,
                          std::vector<SeriesEvent>* events) {
  if (covariate_sink_) covariate_sink_->Publish(name_, to, y);
  while (next_planned_ < planned_.size() && planned_[next_planned_].at <= to) {
    ApplyPlannedChange(planned_[next_planned_++]);
  }
  if (Unlearned(to)) return;
  ++observations_;
  value_sum_ += y;
  JoinCovariates(to);
  if (!forecaster_) {
    probe_.push_back({from, to, y, covariate_values_});
    if (static_cast<int>(probe_.size()) >= kProbe) StartForecaster();
    return;
  }
  SetCovariates(covariate_values_.data());
  // The forecast comes from the first half of a two-phase update, so the
  // regressors and P x are computed once per observation.
  const StatusOr<Forecast> begun = forecaster_->BeginUpdate(from, to);
  if (!begun.ok())
    return;  // earlier than the model's clock: cannot happen after reordering
  const Forecast& f = *begun;
  const double spread = std::sqrt(1.0 + f.parameter_variance_factor);
  const double u = (y - f.value) / spread;
  const double sigma = scale_.sigma();
  // The first `dimension` innovations of a regression started from a diffuse
  // prior carry no information about the noise (they only pin the coefficients
  // down; Durbin & Koopman 2001, "Time Series Analysis by State Space Methods",
  // ch. 5, diffuse initialisation), so they feed neither the scale nor the detectors.
  const bool identified = forecaster_->updates() >= forecaster_->dimension();
  const bool scale_known = scale_.count() >= kMinScaleResiduals && sigma > 0;
  // Nor before the model has once known its coefficients better than one
  // reading's noise: the forecast's variance from its coefficients, x' P x in
  // units of the noise, less what a wandering level always leaves (Forecast::
  // unsettled_variance_factor), under 1. A daily season seen for less than a
  // day is extrapolated, and its errors, not the series, would drive the
  // detectors. Once settled it stays so (until a planned change reopens the
  // model): a sparse series whose factor hovers near 1, or one whose level
  // variance a re-baseline has just opened, is not switched on and off. On
  // seeded null streams at arl0 5000 with a daily season and 10-minute
  // readings (the default warmup of 48 is 8 hours), alerts in the first 300
  // readings of 100 streams: Poisson mean 2 51 -> 2, Student-t 43 -> 19,
  // AR(1) 55 -> 46, Gaussian 4 -> 3.
  if (f.unsettled_variance_factor < 1.0) settled_ = true;
  const bool armed =
      identified && observations_ > design_->profile.warmup && scale_known && settled_;
  // The scale, phase profile and whitening hold still while a level detector
  // is on its way to a threshold, so a level change being tested for is not
  // learned away first. Not while the variance CUSUM is: a scale held still
  // then makes its early error look like a change of spread (more false
  // variance alerts on the demo and on the airline data than it finds).
  const bool suspicious = Suspicious(kBaselineFraction);
  const int bin = PhaseBin(from, to);
  const ResidualProfile::Expectation phase = profile_->MeanAndSigma(bin, sigma);
  const double phase_mean = phase.mean;
  const double v = u - phase_mean;
  // A phase whose spread sits at the resolution floor (a shut hour, zero every
  // week), once the scale is known, is not whitened and does not teach the
  // whitener: the correlation learned where readings vary says nothing of one
  // that never does, and the filter's state from the last open hour would
  // otherwise carry into the shut ones, there divided by the floor. Measured
  // on the demo's pallets over two sets of 24 draws (harbourside_seeds.py):
  // draws with a false alert 12 -> 7 and 11 -> 6.
  const double phase_sigma = Floored(phase.sigma);  // PhaseSigma(bin)
  const bool spread_seen = phase_sigma > 1.5 * design_->scale.floor;
  // The whitener sees v in the series' units, not divided by its phase's
  // spread: a residual that carries across phase bins (the tail of a defrost
  // bump) is then predicted from the last one at its own size. Whitening v
  // over the phase's spread instead (and scaling the output back) took the
  // demo compressor's lag-1 correlation of z from -0.13 to 0.02, but over 48
  // demo draws (harbourside_seeds.py, seeds 13-60) unexplained alerts went
  // from 61 to 111, 54 of them freezer level alerts at the end of a defrost,
  // and the compressor's door-seal step was found in time in 34 draws, not 41.
  const double a = identified && (spread_seen || !scale_known)
                       ? whitener_.Whiten(to, v, arrival_.mean_gap(), sigma, !suspicious)
                       : v;
  const double z = armed && phase_sigma > 0 ? a / phase_sigma : 0.0;
  last_z_ = z;

  // Huber-type robust fit (common practice, no source): an extreme residual
  // moves the model as if it were at 4 sigma, so one spike cannot drag the
  // forecast; while a detector is well on its way to a threshold, at most 1 sigma,
  // so the model does not quietly learn the change being tested for. If the
  // suspicion fades, ordinary learning resumes; if it fires, re-baselining
  // moves the model anyway. Only while armed, so only once the model knows its
  // coefficients (settled_): before, its forecast can be far off, and a reading
  // clipped toward that forecast cannot correct it, so the fit follows its own
  // extrapolation (counts of 0 to 5 were forecast at -140,000 within a hundred
  // readings in a seeded Poisson stream, false_alarm_test).
  double y_fit = y;
  const double clip = Suspicious(kLearnFraction) ? 1.0 : 4.0;
  if (armed && std::abs(z) > clip) {
    y_fit =
        f.value + (phase_mean + std::copysign(clip * phase_sigma, a)) * spread;
  }
  (void)forecaster_->CommitUpdate(y_fit);
  if (!rivals_.empty()) {
    if (forecaster_->updates() > kScoreAfterDimensions * forecaster_->dimension()) {
      forecaster_score_.Add(y - f.value, f.parameter_variance_factor);
    }
    ScoreRivals(from, to, y);
    // The best-scoring forecaster leads; once armed the choice is final.
    for (RivalForecaster& rival : rivals_) {
      if (rival.score.Criterion(rival.forecaster.options().level_noise > 0) <
          forecaster_score_.Criterion(forecaster_->options().level_noise > 0)) {
        std::swap(*forecaster_, rival.forecaster);
        std::swap(forecaster_score_, rival.score);
      }
    }
    if (observations_ > design_->profile.warmup) {
      std::vector<RivalForecaster>().swap(rivals_);
    }
  }
  // A count's expectation for the count CUSUM: the phases' times its long
  // bin's ratio of counts to them, once learned (residual_profile.h: a shut
  // day is a multiple of the day's shape, not an amount added to each hour).
  // Both as they stood before this reading.
  const bool count = design_->profile.kind == SeriesKind::kCount;
  const double count_base =
      count ? f.value + profile_->PhaseMean(bin, sigma) * spread : 0.0;
  const std::optional<double> count_ratio =
      count ? profile_->CountRatio(bin) : std::nullopt;
  // A two-level profile's long bins learn only from residuals of a forecaster
  // that has seen one whole profile period (a week). Before, its longer
  // season's Fourier terms are not pinned down: they follow the latest readings
  // (the first week's weekly terms soak up each day as it comes), and the
  // residuals they leave say nothing settled about one day of the week. A long
  // bin sees its hour of the week once a period, so a first Sunday learned so
  // would be half of what it knows of Sundays when a two-week warmup ends (on
  // the demo's compressor, a level alert on the first Sunday after warmup in
  // many draws). The phase bins pool every repeat of the shorter season, so the
  // first day is soon a small share of theirs, and they learn from the start.
  if (identified && !suspicious) {
    const bool long_bins = to - forecaster_->first_time() >= profile_->period();
    if (count && long_bins) profile_->UpdateCount(bin, y, count_base);
    scale_.Update(a);
    profile_->Update(bin, u, a, scale_.sigma(), long_bins);
  }

  if (regime_start_) {
    ++regime_observations_;
    if (regime_observations_ >= design_->profile.warmup) {
      SeriesEvent e;
      e.type = EventType::kRetrain;
      e.kind = AlertKind::kLevel;
      e.detected_at = to;
      e.change_at = *regime_start_;
      e.window_to = to;
      events->push_back(e);
      regime_start_.reset();
    }
  }
  if (!armed) return;
  if (!count_chart_decided_) ChooseCountChart();

  // The variance chart sees this reading before the level detectors, but they
  // decide first when both fire on it: a level shift inflates z^2, so a reading
  // that completes the evidence for a new level also pushes the variance chart
  // over its line, while a wider spread alone seldom completes a level
  // detector's evidence on the very same reading. The level alert re-baselines
  // and resets the variance chart. Not while the spread at this phase sits at
  // its floor (values that never vary, such as one event per reading, or a
  // count that is zero every night): a narrower spread cannot be seen there.
  // Nor on a count series watched by the count CUSUM: a Poisson count's
  // variance is its mean, so a change of it is a change of level, which that
  // chart sees. Nor where a count series expects fewer than kLowCountMean: its
  // z is then too discrete and skewed for a chart that models z as Gaussian
  // in its spread (runs of zeros at quiet hours look like a narrower spread,
  // one busy hour like a new level). BOCPD, which models both, skips those
  // readings too, unless it is the only level detector (rather than go blind).
  // The reading's expectation as it stood before the reading, as count_base
  // is: the forecast and phase mean the residual was taken from, not the
  // profile after this reading has moved it toward itself.
  const double expected = f.value + phase_mean * spread;
  const double expected_count =
      count_ratio ? *count_ratio * std::max(count_base, 0.0) : expected;
  const bool near_normal =
      design_->profile.kind != SeriesKind::kCount || expected >= kLowCountMean;
  const bool resolvable = spread_seen && near_normal && !count_chart();
  Alarm variance_alarm{};
  if (resolvable && observations_ >= variance_hold_until_) {
    if (RefitOpen()) {
      CollectForRefit(std::min(z * z, design_->variance.cap),
                      std::numeric_limits<double>::quiet_NaN());
    }
    variance_alarm = variance_.Update(z, to);
  }
  // Where a count series expects few events, z is skewed: a count of 2 where
  // 0.4 is expected stands 2.5 spreads up though one reading in sixteen is
  // that high, and a quiet night of such readings walks the Gaussian level
  // detectors to a false rise (on the demo's door openings, Saturday nights).
  // There they read the count's mid-p quantile residual under Poisson at the
  // expected count (PoissonMidPQuantileResidual), near N(0, 1) in both tails,
  // scaled by the Poisson spread over the phase's own, so counts more variable
  // than Poisson keep their wider spread. Mid-p narrows the smallest counts
  // (variance 0.55 at a mean of 0.4, 0.87 at 2), so the detectors are more
  // cautious there. Measured over 48 seeded draws of the demo
  // (harbourside_seeds.py, seeds 13-60): draws with a false door alert 9 -> 2,
  // with a false pallets alert 13 -> 9, unexplained alerts 76 -> 62; on
  // Poisson(2) null streams (false_alarm_test) 22 -> 2 alerts in 198,000
  // readings, and a 2-sd step is found after 8 readings instead of 7
  // (step_delay_test). The count CUSUM reads the count itself, unchanged.
  // !near_normal: a count series expecting fewer than kLowCountMean.
  if (!near_normal && phase_sigma > 0) {
    const double mean = std::max(expected, kCountMeanFloor);
    last_z_ = PoissonMidPQuantileResidual(std::max(0.0, std::round(y)), mean) *
              std::sqrt(mean) / (phase_sigma * spread);
  }
  // Health is of what the level detectors read: at a quiet count reading, the
  // quantile residual.
  health_.Add(last_z_);
  if (observations_ >= level_hold_until_) {
    const size_t before = events->size();
    DecideLevel(to, y, expected_count, f.value, sigma * spread,
                spread_seen && (near_normal || level_.size() == 1), events);
    if (events->size() > before) return;
  }
  if (!variance_alarm.fired) return;
  SeriesEvent e;
  e.kind = AlertKind::kVariance;
  e.direction = variance_alarm.direction;
  e.detected_at = to;
  e.change_at = variance_alarm.change_at;
  e.magnitude = variance_alarm.shift;  // ratio of standard deviations
  e.before = sigma;
  e.after = sigma * variance_alarm.shift;
  events->push_back(e);
  // A variance alert changes what z means for the level detectors: they restart.
  scale_.Restart(20);  // re-learn the spread quickly
  ResetLevelDetectors();
  const long long hold =
      design_->profile.cooldown > 0 ? design_->profile.cooldown : design_->profile.warmup;
  variance_hold_until_ = observations_ + hold;
  refit_hold_until_ = std::max(refit_hold_until_, observations_ + design_->profile.warmup);
  level_hold_until_ = std::max(level_hold_until_, observations_ + 20);
  StartRegime(variance_alarm.change_at, ReadingsSince(variance_alarm, observations_));
}

void SeriesMonitor::DecideLevel(EventTime t, double y, double expected, double forecast,
                                double sigma, bool bocpd_sees,
                                std::vector<SeriesEvent>* events) {
  const ProfileOptions& profile = design_->profile;
  const double clipped_z = std::clamp(last_z_, -kLevelClip, kLevelClip);
  if (profile.adapt_thresholds && RefitOpen()) CollectLevelSample(clipped_z);
  recent_z_[recent_count_ % kChangeWindow] = clipped_z;
  recent_times_[recent_count_ % kChangeWindow] = t;
  ++recent_count_;
  for (size_t i = 0; i < level_.size(); ++i) {
    // BOCPD models the spread as well as the mean, so residuals pinned at the
    // resolution floor (all zero), or too discrete to be near Gaussian (low
    // counts), would look to it like a change; the mean detectors still watch them.
    if (!bocpd_sees && level_kinds_[i] == DetectorKind::kBocpd) continue;
    StatusOr<Alarm> result = VisitLevel(
        [&](auto& detector) -> StatusOr<Alarm> {
          using T = std::decay_t<decltype(detector)>;
          if constexpr (std::is_same_v<T, PoissonCusum>) {
            // The in-control mean: the forecast, kept above a twentieth of the
            // design mean on the upper side (a forecast near zero would make
            // any count a rise); the lower side takes it as it is, not below
            // zero (a zero count where none is expected says nothing of a fall).
            const double mu0 = detector.options().mu0;
            const double down_ratio = std::max(expected, 0.0) / mu0;
            const double ratio = std::max(down_ratio, kCountMeanFloor);
            const double mean = ratio * mu0;
            const double count =
                std::min(std::max(0.0, std::round(y)),
                         std::max(1.0, std::floor(mean + kLevelClip * std::sqrt(mean))));
            if (RefitOpen()) CollectCountIncrements(count, down_ratio, detector);
            return detector.Update(count, t, ratio, down_ratio);
          } else {
            return detector.Update(clipped_z, t);
          }
        },
        level_[i]);
    if (!result.ok()) continue;
    if (result->fired) {
      if (std::holds_alternative<PoissonCusum>(level_[i])) {
        // The count CUSUM measures its shift in counts; alerts carry it in sd.
        if (sigma > 0) result->shift /= sigma;
      } else if (level_kinds_[i] == DetectorKind::kCusum ||
                 level_kinds_[i] == DetectorKind::kPageHinkley) {
        *result = ReestimateChange(*result);  // both read z
      }
      firings_[i] = {observations_, *result};
    }
    threshold_fraction_[i] =
        result->fired
            ? 0.0
            : VisitLevel([](const auto& d) { return ThresholdFraction(d); },
                         std::as_const(level_[i]));
  }
  int agreeing = 0;
  int best = -1;
  std::uint32_t mask = 0;
  for (size_t i = 0; i < level_.size(); ++i) {
    if (firings_[i].observation < 0 ||
        observations_ - firings_[i].observation >= profile.agree_within) {
      continue;
    }
    ++agreeing;
    mask |= Bit(level_kinds_[i]);
    if (best < 0 || Trust(level_kinds_[i]) < Trust(level_kinds_[best])) {
      best = static_cast<int>(i);
    }
  }
  if (agreeing < profile.agree) return;

  const Alarm alarm =
      firings_[best].alarm;  // a copy: ResetLevelDetectors clears firings_
  const long long readings = ReadingsSince(alarm, firings_[best].observation);
  SeriesEvent e;
  e.kind = AlertKind::kLevel;
  e.direction = alarm.direction;
  e.detected_at = t;
  e.change_at = alarm.change_at;
  e.detectors = mask;
  // The detectors on z see whitened residuals, where a step shows at its full
  // size only in the first innovations and then as StepResponse() of it
  // (residual_whitener.h). Their shift estimate is the mean of z since
  // change_at: divided by the whitener's mean response over as many
  // observations, it is the step in the readings, which the alert reports and
  // the forecaster moves by. The count CUSUM reads the counts themselves.
  const double response =
      std::holds_alternative<PoissonCusum>(level_[best])
          ? 1.0
          : whitener_.MeanStepResponse(std::min(readings, kStepResponseReadings));
  e.magnitude_sd = alarm.shift / response;
  e.magnitude = e.magnitude_sd * sigma;
  e.before = forecast;
  e.after = forecast + e.magnitude;
  events->push_back(e);

  // Re-baseline: move the level by the estimated shift and open its variance,
  // so the forecaster settles on the new regime within a few readings.
  if (forecaster_) forecaster_->ShiftLevel(e.magnitude, e.magnitude_sd * e.magnitude_sd);
  ResetLevelDetectors();
  variance_.Reset();
  const long long hold = profile.cooldown > 0 ? profile.cooldown : DefaultCooldown();
  level_hold_until_ = observations_ + hold;
  variance_hold_until_ = std::max(variance_hold_until_, observations_ + hold);
  refit_hold_until_ = std::max(refit_hold_until_, observations_ + profile.warmup);
  StartRegime(alarm.change_at, readings);
}

namespace {

// Long-run variance inflation of a sample taken in order: the variance of sums
// of blocks of kBlock consecutive values over kBlock times the variance of one
// value (1 for independent values, larger when neighbours move together).
// A CUSUM's drift over many steps is what reaches its threshold, so positively
// correlated increments act like independent ones with this much more variance,
// and by the Brownian approximation (Siegmund 1985, ch. 2; MEM) the threshold
// for the same ARL0 grows about in proportion.
double VarianceInflation(const std::vector<double>& sample) {
  constexpr size_t kBlock = 20;
  const size_t blocks = sample.size() / kBlock;
  if (blocks < 10) return 1.0;
  double mean = 0, var = 0;
  for (double x : sample) mean += x;
  mean /= static_cast<double>(sample.size());
  for (double x : sample) var += (x - mean) * (x - mean);
  var /= static_cast<double>(sample.size() - 1);
  if (!(var > 0)) return 1.0;
  double block_var = 0;
  for (size_t b = 0; b < blocks; ++b) {
    double sum = 0;
    for (size_t i = 0; i < kBlock; ++i) sum += sample[b * kBlock + i] - mean;
    block_var += sum * sum;
  }
  block_var /= static_cast<double>(blocks);
  return std::max(1.0, block_var / (static_cast<double>(kBlock) * var));
}

// Variance of min(Z^2, cap) for Z ~ N(0,1): E[min(Z^4, cap^2)] - E[min(Z^2, cap)]^2,
// with E[Z^4; |Z| < a] = 3 (2 Phi(a) - 1) - 2 phi(a) (a^3 + 3a), a = sqrt(cap)
// (1.97701 at cap 12.25, agreeing with scipy.stats.norm.expect; COMP).
double CappedChiSquareVariance(double cap) {
  const double a = std::sqrt(cap);
  const double phi = std::exp(-0.5 * cap) / std::sqrt(2.0 * std::numbers::pi);
  const double tail = std::erfc(a / std::numbers::sqrt2);  // P(|Z| > a)
  const double fourth =
      3.0 * (1.0 - tail) - 2.0 * phi * (a * a * a + 3.0 * a) + cap * cap * tail;
  const double mean = ResidualScale::ClippedSecondMoment(a);
  return fourth - mean * mean;
}

// Variance of min(X, cap) for X ~ Exp(1): E[min(X, c)^2] = 2 - e^-c (2c + 2),
// E[min(X, c)] = 1 - e^-c (0.970249 at c = 6, agreeing with scipy.stats.expon.expect;
// COMP).
double CappedExponentialVariance(double cap) {
  const double tail = std::exp(-cap);
  const double mean = 1.0 - tail;
  return 2.0 - tail * (2.0 * cap + 2.0) - mean * mean;
}

// Whether a sample's spread, with its long-run variance inflation, departs
// from the model's enough to re-fit: within 15% the design stands, and the
// (costly) chain is not run.
bool NeedsRefit(const std::vector<double>& sample, double model_variance) {
  double mean = 0, var = 0;
  for (double x : sample) mean += x;
  mean /= static_cast<double>(sample.size());
  for (double x : sample) var += (x - mean) * (x - mean);
  var /= static_cast<double>(sample.size() - 1);
  return var * VarianceInflation(sample) > 1.15 * model_variance;
}

// The re-fitted decision interval: the empirical chain's h, grown by the
// sample's long-run variance inflation, within [design, ceiling x design].
double Refit(std::vector<double> increments, double arl0, double design, double ceiling) {
  const double inflation = VarianceInflation(increments);
  auto h = CalibrateOneSidedCusumFromSample(std::move(increments), arl0, design,
                                            ceiling * design);
  if (!h.ok()) return design;
  return std::clamp(*h * inflation, design, ceiling * design);
}

// Re-fits both sides of a CUSUM pair on a score s (upper side: increments
// s - k_upper; lower side: k_lower - s) from a sample of s. A sample that
// behaves like the model keeps the design.
std::pair<double, double> RefitSides(const std::vector<double>& scores,
                                     double model_variance, double k_upper,
                                     double k_lower, double upper_h, double lower_h,
                                     double side_arl0, double ceiling) {
  if (!NeedsRefit(scores, model_variance)) return {upper_h, lower_h};
  std::vector<double> upper(scores), lower(scores);
  for (double& x : upper) x -= k_upper;
  for (double& x : lower) x = k_lower - x;
  return {Refit(std::move(upper), side_arl0, upper_h, ceiling),
          Refit(std::move(lower), side_arl0, lower_h, ceiling)};
}

// Whether a sample of capped scores reaches its cap more often than the
// chart's model would by chance: the exact binomial test of the count at the
// cap against the model's tail probability p, one-sided at kTailTestLevel.
// Heavy tails show there first, and in few values. For the variance chart
// (cap 12.25, p = P(|Z| >= 3.5) = 4.7e-4), 2 values at the cap in 125 or 250
// reject and 3 in 500; a Student-t with 3 d.f. puts about 2% of its robustly
// scaled residuals there. For the arrival model (cap 6 mean gaps,
// p = e^-6 = 2.5e-3), 3 in 125, 4 in 250 and 5 in 500.
bool ReachesCapTooOften(const std::vector<double>& sample, double cap, double p) {
  constexpr double kTailTestLevel = 0.01;
  // Quantised values read back within half a level of the cap (quantised_sample.h).
  const double at_cap = cap * (1.0 - 1e-4);
  const long long n = static_cast<long long>(sample.size());
  long long hits = 0;
  for (double x : sample) hits += x >= at_cap;
  // P(X >= hits) = 1 - sum over i < hits of C(n, i) p^i (1 - p)^(n - i).
  double term = std::pow(1.0 - p, static_cast<double>(n));
  double below = 0.0;
  for (long long i = 0; i < hits; ++i) {
    below += term;
    term *= static_cast<double>(n - i) / static_cast<double>(i + 1) * p / (1.0 - p);
  }
  return 1.0 - below <= kTailTestLevel;
}

}  // namespace

bool SeriesMonitor::RefitDue(size_t sample_size) const {
  return sample_size == kRefitSample / 8 || sample_size == kRefitSample / 4 ||
         sample_size == kRefitSample / 2 || sample_size >= RefitSampleSize();
}

size_t SeriesMonitor::RefitSampleSize() const {
  // Samples hold observations: buckets where the series is bucketed, readings
  // (at the arrival model's mean gap) where it is not.
  const std::optional<EventTime>& every = design_->profile.every;
  const double gap = every ? static_cast<double>(*every) : arrival_.mean_gap();
  if (!profile_ || !(gap > 0)) return kRefitSample;
  const double period = static_cast<double>(profile_->period()) / gap;
  return static_cast<size_t>(std::clamp(std::ceil(period), static_cast<double>(kRefitSample),
                                        static_cast<double>(kMaxRefitSample)));
}

void SeriesMonitor::CollectForRefit(double variance_q, double arrival_score) {
  // Each side of the variance and arrival pairs holds 1/8 of the false-alarm
  // budget (1/4 per family, see the header), so it is fitted to 8 x arl0.
  const double side_arl0 = 8.0 * design_->profile.arl0;
  if (!variance_refitted_ && std::isfinite(variance_q)) {
    variance_sample_.Add(variance_q);
    if (RefitDue(variance_sample_.size())) {
      const VarianceCusumOptions& o = design_->variance;
      const VarianceCusumOptions& now = variance_.options();
      const auto h = StagedRefit(variance_sample_,
                                 {CappedChiSquareVariance(o.cap),
                                  std::erfc(std::sqrt(o.cap) / std::numbers::sqrt2),
                                  o.cap, o.k_up(), o.k_down(), o.up_h, o.down_h},
                                 now.up_h, now.down_h, side_arl0);
      if (h) variance_.SetDecisionIntervals(h->first, h->second);
    }
    if (variance_sample_.size() >= RefitSampleSize()) {
      variance_refitted_ = true;
      variance_sample_.Release();
    }
  }
  if (!arrival_refitted_ && std::isfinite(arrival_score)) {
    arrival_sample_.Add(arrival_score);
    if (RefitDue(arrival_sample_.size())) {
      const ArrivalModelOptions& o = design_->arrival;
      const ArrivalModelOptions& now = arrival_.options();
      const auto h =
          StagedRefit(arrival_sample_,
                      {CappedExponentialVariance(o.gap_cap), std::exp(-o.gap_cap),
                       o.gap_cap, ArrivalModelOptions::kSlowerReference,
                       ArrivalModelOptions::kFasterReference, o.slower_h, o.faster_h},
                      now.slower_h, now.faster_h, side_arl0);
      if (h) arrival_.SetDecisionIntervals(h->first, h->second);
    }
    if (arrival_sample_.size() >= RefitSampleSize()) {
      arrival_refitted_ = true;
      arrival_sample_.Release();
    }
  }
}

std::optional<std::pair<double, double>> SeriesMonitor::StagedRefit(
    const QuantisedSample& sample, const PairModel& model, double upper_h, double lower_h,
    double side_arl0) const {
  const bool full = sample.size() >= RefitSampleSize();
  const std::vector<double> values = sample.Values();
  if (!full && !ReachesCapTooOften(values, model.cap, model.tail_probability)) {
    return std::nullopt;
  }
  auto h = RefitSides(values, model.variance, model.k_upper, model.k_lower, model.upper_h,
                      model.lower_h, side_arl0, kRefitCeiling);
  if (!full) h = {std::max(h.first, upper_h), std::max(h.second, lower_h)};
  return h;
}

void SeriesMonitor::ChooseCountChart() {
  count_chart_decided_ = true;
  const ProfileOptions& profile = design_->profile;
  if (profile.kind != SeriesKind::kCount || profile.count_chart == CountChart::kNormal ||
      observations_ <= 0) {
    return;
  }
  const double mean = value_sum_ / static_cast<double>(observations_);
  if (profile.count_chart == CountChart::kAuto) {
    if (!(mean < kLowCountMean)) return;
    // Overdispersed counts (a day factor, bursts: variance above the mean)
    // would fire the count CUSUM far more often than its chain promises; the
    // normal CUSUM on the residuals' own spread keeps them. The dispersion
    // index test (Fisher 1950; Cochran 1954, Biometrics 10:417-451; MEM): under
    // Poisson, (n - 1) s^2 / mean is chi-square with n - 1 degrees of freedom,
    // about 1 + 3 sqrt(2 / (n - 1)) times the mean at its 0.1% upper point.
    const double n = static_cast<double>(
        std::min<long long>(observations_, design_->scale.window));
    const double sigma = scale_.sigma();
    if (n > 2 && sigma * sigma > mean * (1.0 + 3.0 * std::sqrt(2.0 / (n - 1.0)))) return;
  }
  // A series of zeros so far has no mean to design at; a tenth of a count
  // per reading stands in (one count then moves the upper side by most of a step).
  const double mu = std::max(mean, 0.1);
  const double step = profile.shift * std::sqrt(mu);
  // Each side for twice the per-detector ARL0, as the two sides of the CUSUM
  // share it. k to a quarter count above one count per reading (the chain then
  // has at most 4 h states), automatic below.
  const double side_arl0 = 2.0 * design_->level.per_detector_arl0;
  const int denominator = mu >= 1.0 ? 4 : 0;
  const auto up = CalibratePoissonCusum(mu, mu + step, side_arl0,
                                        PoissonSignalRule::kAtLeast, denominator);
  const auto down = CalibratePoissonCusum(mu, std::max(mu - step, 0.25 * mu), side_arl0,
                                          PoissonSignalRule::kAtLeast, denominator);
  if (!up.ok() || !down.ok()) return;  // the normal CUSUM stays
  PoissonCusumOptions o;
  o.mu0 = mu;
  o.k = up->k;
  o.h = up->h;
  o.two_sided = true;
  o.k_down = down->k;
  o.h_down = down->h;
  o.arl0 = design_->level.per_detector_arl0;
  if (!o.IsValid(nullptr)) return;
  for (std::size_t i = 0; i < level_.size(); ++i) {
    if (level_kinds_[i] == DetectorKind::kCusum) level_[i].emplace<PoissonCusum>(o);
  }
}

bool SeriesMonitor::count_chart() const {
  for (const LevelDetector& d : level_) {
    if (std::holds_alternative<PoissonCusum>(d)) return true;
  }
  return false;
}

void SeriesMonitor::CollectCountIncrements(double count, double down_ratio,
                                           PoissonCusum& chart) {
  if (count_refitted_) return;
  count_sample_.push_back(count);
  count_sample_.push_back(down_ratio);
  if (count_sample_.size() < 2 * RefitSampleSize()) return;
  const PoissonCusumOptions& o = chart.options();
  std::vector<double> upper, lower;
  upper.reserve(count_sample_.size() / 2);
  lower.reserve(count_sample_.size() / 2);
  for (std::size_t i = 0; i + 1 < count_sample_.size(); i += 2) {
    const double down_ratio = count_sample_[i + 1];
    upper.push_back(count_sample_[i] - std::max(down_ratio, kCountMeanFloor) * o.k);
    lower.push_back(down_ratio * o.k_down - count_sample_[i]);
  }
  const double side_arl0 = 2.0 * design_->level.per_detector_arl0;
  chart.SetDecisionIntervals(Refit(std::move(upper), side_arl0, o.h, kRefitCeiling),
                             Refit(std::move(lower), side_arl0, o.h_down, kRefitCeiling));
  count_refitted_ = true;
  std::vector<double>().swap(count_sample_);
}

void SeriesMonitor::CollectLevelSample(double clipped_z) {
  if (adapted_h_ > 0) return;
  level_sample_.Add(clipped_z);
  if (level_sample_.size() < RefitSampleSize()) return;
  const std::vector<double> sample = level_sample_.Values();
  for (std::size_t i = 0; i < level_.size(); ++i) {
    Cusum* cusum = std::get_if<Cusum>(&level_[i]);
    if (cusum == nullptr) continue;
    const CusumOptions& o = cusum->options();
    const auto [upper, lower] =
        RefitSides(sample, ResidualScale::ClippedSecondMoment(kLevelClip), o.k, -o.k, o.h,
                   o.h, 2.0 * design_->level.per_detector_arl0, kRefitCeiling);
    adapted_h_ = std::max(upper, lower);
    cusum->SetDecisionInterval(adapted_h_);
  }
  if (adapted_h_ <= 0) adapted_h_ = -1;  // no CUSUM to adapt: stop collecting
  level_sample_.Release();
}

void SeriesMonitor::BuildLevelDetectors(const DetectorDesign& d) {
  adapted_h_ = 0.0;
  level_sample_.Release();
  count_chart_decided_ = false;
  count_refitted_ = false;
  count_sample_.clear();
  level_.clear();
  level_kinds_.clear();
  for (DetectorKind kind : d.detectors) {
    switch (kind) {
      case DetectorKind::kCusum:
        level_.emplace_back(Cusum(d.cusum));
        break;
      case DetectorKind::kPageHinkley:
        level_.emplace_back(PageHinkley(d.page_hinkley));
        break;
      case DetectorKind::kBocpd:
        level_.emplace_back(BoxedBocpd(Bocpd(d.bocpd, d.bocpd_tables)));
        break;
      case DetectorKind::kEwma:
        level_.emplace_back(Ewma(d.ewma));
        break;
    }
    level_kinds_.push_back(kind);
  }
}

void SeriesMonitor::Retune(const ProfileDesign* design) {
  design_ = design;
  BuildLevelDetectors(design->level);
  firings_.assign(level_.size(), Firing{});
  threshold_fraction_.assign(level_.size(), 0.0);
  variance_ = VarianceCusum(design->variance);
  arrival_.SetDecisionIntervals(design->arrival.slower_h, design->arrival.faster_h);
  variance_refitted_ = arrival_refitted_ = false;
  variance_sample_ = QuantisedSample(0.0, design->variance.cap);
  arrival_sample_ = QuantisedSample(0.0, design->arrival.gap_cap);
}

void SeriesMonitor::ResetLevelDetectors() {
  for (auto& detector : level_) VisitLevel([](auto& d) { d.Reset(); }, detector);
  for (auto& firing : firings_) firing = Firing{};
  std::fill(threshold_fraction_.begin(), threshold_fraction_.end(), 0.0);
}

long long SeriesMonitor::SettlingReadings() const {
  return forecaster_ ? kSettlingDimensions * forecaster_->dimension() : 0LL;
}

long long SeriesMonitor::DefaultCooldown() const {
  const long long warmup = design_->profile.warmup;
  if (!forecaster_) return warmup;
  return std::min(warmup, SettlingReadings());
}

bool SeriesMonitor::Suspicious(double fraction_of_threshold) const {
  for (double fraction : threshold_fraction_) {
    if (fraction > fraction_of_threshold) return true;
  }
  return false;
}

long long SeriesMonitor::ReadingsSince(const Alarm& alarm, long long fired_at) const {
  return std::max<long long>(alarm.length, 1) + std::max(observations_ - fired_at, 0LL);
}

// A CUSUM's excursion starts at the maximum-likelihood change point for a step
// of the designed size 2k, and its mean over the excursion is the step's
// estimate (Page 1954; Hinkley 1971, Biometrika 58:509-523). A step much
// larger than designed is found within a few readings, but the excursion may
// have begun days earlier on a run of small positive z, so the change point
// comes out early and the step diluted: on the demo's hand-read meter, the
// door seal's step of about 9 sd was dated one to two days (three to six
// readings) before it, at 1.8 sd. With the step's size unknown too, the
// maximum-likelihood change point for a shift in the mean of unit-variance
// readings with known mean 0 is the tau maximising S_tau^2 / n_tau, S_tau the
// sum of the n_tau readings from tau on (Hinkley 1970, Biometrika 57:1-17;
// from memory), taken over the excursion's start and each of its last
// kChangeWindow readings, with the sign of the firing; the step is then
// S_tau / n_tau. Page-Hinkley's excursion is estimated the same way (its own
// step is measured from its running mean, near 0 for standardised residuals).
// The readings are the winsorised z the detectors read, so one outlier weighs
// at most kLevelClip.
Alarm SeriesMonitor::ReestimateChange(const Alarm& alarm) const {
  if (alarm.length <= 0) return alarm;
  const double sign = alarm.direction == Direction::kDown ? -1.0 : 1.0;
  // The whole excursion, from the detector's own sum, measured from zero as
  // the candidates below are (Page-Hinkley's shift is measured from its
  // running mean before the excursion: where that mean sat below zero, its
  // shift outscored a later start that fits the step better; in a demo draw
  // the door seal was dated 100 minutes early so).
  const double whole = sign * alarm.input_mean > 0.0 ? alarm.input_mean : 0.0;
  double best = whole * whole * static_cast<double>(alarm.length);
  Alarm out = alarm;
  const long long stored = static_cast<long long>(
      std::min<std::uint64_t>(recent_count_, kChangeWindow));
  const long long reach = std::min<long long>(alarm.length, stored);
  double sum = 0.0;
  for (long long n = 1; n <= reach; ++n) {
    const std::size_t slot =
        static_cast<std::size_t>((recent_count_ - static_cast<std::uint64_t>(n)) % kChangeWindow);
    sum += recent_z_[slot];
    const double score = sign * sum > 0.0 ? sum * sum / static_cast<double>(n) : 0.0;
    if (score > best) {
      best = score;
      out.change_at = recent_times_[slot];
      out.length = n;
      out.shift = sum / static_cast<double>(n);
    }
  }
  return out;
}

void SeriesMonitor::StartRegime(EventTime change_at, long long readings) {
  regime_start_ = change_at;
  regime_observations_ = readings;  // already in the new regime
}

std::vector<SeriesMonitor::DetectorSnapshot> SeriesMonitor::DetectorSnapshots() const {
  std::vector<DetectorSnapshot> out;
  out.reserve(level_.size() + 2);
  // Of two sides, the one with the larger fraction of its decision interval.
  const auto nearer = [](std::string_view name, double a, double a_h, double b,
                         double b_h) {
    return a / a_h >= b / b_h ? DetectorSnapshot{name, a, a_h}
                              : DetectorSnapshot{name, b, b_h};
  };
  for (std::size_t i = 0; i < level_.size(); ++i) {
    const std::string_view name = ToString(level_kinds_[i]);
    VisitLevel(
        [&](const auto& detector) {
          using T = std::decay_t<decltype(detector)>;
          if constexpr (std::is_same_v<T, Cusum>) {
            out.push_back({name, std::max(detector.upper(), detector.lower()),
                           detector.options().h});
          } else if constexpr (std::is_same_v<T, PageHinkley>) {
            out.push_back({name,
                           std::max(detector.up_statistic(), detector.down_statistic()),
                           detector.options().lambda});
          } else if constexpr (std::is_same_v<T, Bocpd>) {
            out.push_back(
                {name, detector.change_probability(), detector.options().threshold});
          } else if constexpr (std::is_same_v<T, PoissonCusum>) {
            out.push_back(nearer(name, detector.upper(), detector.options().h,
                                 detector.lower(), detector.options().h_down));
          } else {
            out.push_back({name, std::abs(detector.value()), detector.limit()});
          }
        },
        level_[i]);
  }
  const VarianceCusumOptions& v = variance_.options();
  out.push_back(nearer("variance", variance_.wider_statistic(), v.up_h,
                       variance_.narrower_statistic(), v.down_h));
  const ArrivalModelOptions& a = arrival_.options();
  out.push_back(nearer("rate", arrival_.slower_statistic(), a.slower_h,
                       arrival_.faster_statistic(), a.faster_h));
  return out;
}

std::optional<SeriesMonitor::RunLengthSnapshot> SeriesMonitor::RunLength() const {
  for (const LevelDetector& detector : level_) {
    if (const BoxedBocpd* boxed = std::get_if<BoxedBocpd>(&detector)) {
      const Bocpd& bocpd = **boxed;
      return RunLengthSnapshot{bocpd.map_run_length(), bocpd.change_probability()};
    }
  }
  return std::nullopt;
}

namespace {

void SaveScore(const auto& score, SnapshotWriter& w) {
  w.F64(score.scaled_squares);
  w.F64(score.log_spreads);
  w.I64(score.count);
  w.F64(score.previous);
  w.F64(score.cross);
  w.F64(score.square);
}

void LoadScore(auto* score, SnapshotReader& r) {
  score->scaled_squares = r.NonNegative("forecast score squares");
  score->log_spreads = r.NonNegative("forecast score spreads");
  score->count = r.Counter("forecast score count");
  score->previous = r.Finite("forecast score previous error");
  score->cross = r.Finite("forecast score cross product");
  score->square = r.NonNegative("forecast score square");
}

void SaveAlarm(const Alarm& a, SnapshotWriter& w) {
  w.Bool(a.fired);
  w.U8(static_cast<std::uint8_t>(a.direction));
  w.I64(a.change_at);
  w.F64(a.shift);
  w.F64(a.statistic);
}

void LoadAlarm(Alarm* a, SnapshotReader& r) {
  a->fired = r.Bool();
  const std::uint8_t direction = r.U8();
  if (direction > static_cast<std::uint8_t>(Direction::kNone)) r.Fail("alarm direction unknown");
  a->direction = static_cast<Direction>(direction);
  a->change_at = r.Time("alarm change time");
  a->shift = r.Finite("alarm shift");
  a->statistic = r.Finite("alarm statistic");
}

// The reorder buffer's bounds: INT64_MIN until the first reading.
EventTime ReorderTime(SnapshotReader& r, std::string_view what) {
  const std::int64_t t = r.I64();
  if (t != INT64_MIN && (t < -SnapshotReader::kMaxTime || t > SnapshotReader::kMaxTime)) {
    r.Fail(std::string(what) + " " + std::to_string(t) + " is out of the time range");
    return INT64_MIN;
  }
  return t;
}

}  // namespace

void SeriesMonitor::Save(SnapshotWriter& w) const {
  w.Tag("SMN5");  // "SMN4" had no refit hold; "SMN3" no recent z; "SMN2" kept
                  // a ring of recent observation times; "SMON" no settled_
  w.Bool(forecaster_.has_value());
  if (forecaster_) {
    forecaster_->Save(w);
    SaveScore(forecaster_score_, w);
    w.U64(rivals_.size());
    for (const RivalForecaster& rival : rivals_) {
      rival.forecaster.Save(w);
      SaveScore(rival.score, w);
    }
  }
  w.U64(probe_.size());
  for (const HeldObservation& h : probe_) {
    w.I64(h.from);
    w.I64(h.to);
    w.F64(h.y);
    w.DoubleVector(h.covariates);
  }
  w.DoubleVector(covariate_means_);
  w.I64Vector(std::vector<std::int64_t>(covariate_counts_.begin(), covariate_counts_.end()));
  scale_.Save(w);
  w.Bool(profile_.has_value());
  if (profile_) {
    w.I64(profile_->period());
    w.I64(profile_->bins());
    w.I64(profile_->fold_bins());
    profile_->Save(w);
  }
  arrival_.Save(w);
  variance_.Save(w);
  w.U64(level_.size());
  for (std::size_t i = 0; i < level_.size(); ++i) {
    w.U8(static_cast<std::uint8_t>(level_kinds_[i]));
    w.Bool(std::holds_alternative<PoissonCusum>(level_[i]));
    VisitLevel([&w](const auto& d) { d.Save(w); }, level_[i]);
    w.I64(firings_[i].observation);
    SaveAlarm(firings_[i].alarm, w);
    w.I64(firings_[i].alarm.length);
    w.F64(threshold_fraction_[i]);
  }
  w.U64(pending_.size());
  for (const auto& [t, v] : pending_) {
    w.I64(t);
    w.F64(v);
  }
  w.I64(newest_);
  w.I64(released_);
  intake_.Save(w);
  w.I64(observations_);
  w.I64(level_hold_until_);
  w.I64(variance_hold_until_);
  w.I64(rate_hold_until_);
  w.F64(last_z_);
  whitener_.Save(w);
  w.DoubleVector(variance_sample_.Values());
  w.DoubleVector(arrival_sample_.Values());
  w.Bool(variance_refitted_);
  w.Bool(arrival_refitted_);
  w.Bool(silent_);
  w.Bool(has_reading_);
  w.I64(last_reading_);
  w.OptionalI64(regime_start_);
  w.I64(regime_observations_);
  w.F64(value_sum_);
  w.Bool(count_chart_decided_);
  w.DoubleVector(count_sample_);
  w.Bool(count_refitted_);
  health_.Save(w);
  w.DoubleVector(level_sample_.Values());
  w.F64(adapted_h_);
  w.Bool(settled_);  // since "SMN2"
  w.U64(recent_count_);  // since "SMN4"
  w.Doubles(recent_z_.data(), recent_z_.size());
  for (EventTime t : recent_times_) w.I64(t);
  w.I64(refit_hold_until_);  // since "SMN5"
}

namespace {

// A re-fit sample, saved as the values it reads back (a checkpoint's format
// does not depend on how a sample is held).
void LoadSample(SnapshotReader& r, std::size_t max, const char* what,
                QuantisedSample* sample) {
  std::vector<double> values(r.BoundedCount(8, max, what));
  r.FiniteDoubles(values.data(), values.size(), what);
  sample->Release();
  sample->Reserve(values.size());
  for (double x : values) sample->Add(x);
}

}  // namespace

Status SeriesMonitor::Load(SnapshotReader& r) {
  // "SMN5" adds the refit hold at the end (an older state has none: its
  // re-fit samples kept collecting through a change, as it did then); "SMN4"
  // adds the level detectors' recent inputs at the end (an older state starts
  // without them); "SMN3" keeps each pending level firing's
  // length instead of a ring of the last 256 observation times (from which an
  // older state's lengths are worked out below); "SMN2" added settled_ at the
  // end, and a "SMON" state counts as settled, as its series armed on warmup
  // alone.
  const bool with_refit_hold = r.NextTagIs("SMN5");
  const bool with_recent = with_refit_hold || r.NextTagIs("SMN4");
  const bool with_lengths = with_recent || r.NextTagIs("SMN3");
  const bool with_settled = with_lengths || r.NextTagIs("SMN2");
  r.Tag(with_refit_hold ? "SMN5"
        : with_recent  ? "SMN4"
        : with_lengths ? "SMN3"
        : with_settled ? "SMN2"
                       : "SMON");
  forecaster_.reset();
  rivals_.clear();
  if (r.Bool()) {
    forecaster_.emplace(design_->forecaster);
    if (Status s = forecaster_->Load(r); !s.ok()) return s;
    LoadScore(&forecaster_score_, r);
    // StartForecaster makes one rival per other level noise of the grid.
    const std::size_t rivals = r.BoundedCount(1, kLevelNoiseGrid.size() - 1, "rival forecasters");
    for (std::size_t i = 0; i < rivals && r.ok(); ++i) {
      rivals_.push_back({SeasonalForecaster(design_->forecaster), {}});
      if (Status s = rivals_.back().forecaster.Load(r); !s.ok()) return s;
      LoadScore(&rivals_.back().score, r);
    }
  }
  // Observations are held only until the forecaster starts, at kProbe.
  probe_.resize(r.BoundedCount(24, forecaster_ ? 0 : kProbe - 1, "held observations"));
  for (HeldObservation& h : probe_) {
    h.from = r.Time("held observation start");
    h.to = r.Time("held observation end");
    h.y = r.Finite("held observation value");
    h.covariates.resize(r.BoundedCount(8, design_->profile.covariates.size(), "covariates"));
    r.FiniteDoubles(h.covariates.data(), h.covariates.size(), "held covariate");
    if (h.covariates.size() != design_->profile.covariates.size()) {
      return r.Fail("covariates differ");
    }
    if (r.ok() && h.from > h.to) return r.Fail("held observation ends before it starts");
  }
  covariate_means_.resize(r.BoundedCount(8, design_->profile.covariates.size(), "covariates"));
  r.FiniteDoubles(covariate_means_.data(), covariate_means_.size(), "covariate mean");
  covariate_counts_.resize(r.BoundedCount(8, covariate_means_.size(), "covariate counts"));
  for (long long& count : covariate_counts_) count = r.Counter("covariate count");
  if (covariate_means_.size() != design_->profile.covariates.size() ||
      covariate_counts_.size() != covariate_means_.size()) {
    return r.Fail("covariates differ");
  }
  covariate_values_.assign(covariate_means_.size(), 0.0);
  if (Status s = scale_.Load(r); !s.ok()) return s;
  profile_.reset();
  if (r.Bool()) {
    const EventTime period = r.Time("phase profile period");
    const std::int64_t bins = r.I64();
    const std::int64_t fold = r.I64();
    if (r.ok() && (period <= 0 || bins < 1 || bins > kMaxLongPhaseBins || fold < 0 ||
                   fold > kMaxPhaseBins)) {
      return r.Fail("phase profile out of range");
    }
    // The phase bins' own season comes with the profile's state (older
    // checkpoints: as wide as the long bins, the constructor's default).
    profile_.emplace(period, static_cast<int>(bins), design_->scale.clip,
                     static_cast<int>(fold));
    if (Status s = profile_->Load(r); !s.ok()) return s;
    if (profile_->fold_bins() != fold) return r.Fail("phase profile bins differ");
  }
  if (forecaster_.has_value() != profile_.has_value()) {
    return r.Fail("phase profile and forecaster do not go together");
  }
  if (Status s = arrival_.Load(r); !s.ok()) return s;
  if (Status s = variance_.Load(r); !s.ok()) return s;
  if (r.Count(1) != level_.size()) return r.Fail("level detectors differ");
  for (std::size_t i = 0; i < level_.size(); ++i) {
    if (r.U8() != static_cast<std::uint8_t>(level_kinds_[i])) {
      return r.Fail("level detectors differ");
    }
    if (r.Bool()) {
      if (level_kinds_[i] != DetectorKind::kCusum) return r.Fail("level detectors differ");
      level_[i].emplace<PoissonCusum>(PoissonCusumOptions{});  // Load sets the options
    } else if (std::holds_alternative<PoissonCusum>(level_[i])) {
      level_[i].emplace<Cusum>(design_->level.cusum);
    }
    if (Status s = VisitLevel([&r](auto& d) { return d.Load(r); }, level_[i]); !s.ok())
      return s;
    firings_[i].observation = r.I64();  // -1: none
    if (r.ok() && (firings_[i].observation < -1 ||
                   firings_[i].observation > SnapshotReader::kMaxCounter)) {
      return r.Fail("level firing observation out of range");
    }
    LoadAlarm(&firings_[i].alarm, r);
    if (with_lengths) firings_[i].alarm.length = r.Counter("level firing length");
    threshold_fraction_[i] = r.NonNegative("level threshold fraction");
  }
  pending_.resize(r.Count(16));
  for (auto& [t, v] : pending_) {
    t = r.Time("held reading time");
    v = r.Finite("held reading value");
  }
  newest_ = ReorderTime(r, "newest reading time");
  released_ = ReorderTime(r, "released reading time");
  if (r.ok()) {
    // Observe pops the buffer as a min-heap on time and releases in order:
    // every held reading is within [released, newest].
    const auto later = [](const auto& a, const auto& b) { return a.first > b.first; };
    if (!std::is_heap(pending_.begin(), pending_.end(), later)) {
      return r.Fail("held readings are not in reorder order");
    }
    for (const auto& [t, v] : pending_) {
      if (t < released_ || t > newest_) return r.Fail("held reading outside the reorder window");
    }
    if (released_ > newest_) return r.Fail("released reading is newer than the newest");
  }
  if (Status s = intake_.Load(r); !s.ok()) return s;
  observations_ = r.Counter("observations");
  level_hold_until_ = r.Counter("level hold");
  variance_hold_until_ = r.Counter("variance hold");
  rate_hold_until_ = r.Counter("rate hold");
  last_z_ = r.Finite("last z");
  if (Status s = whitener_.Load(r); !s.ok()) return s;
  // Samples are re-fitted and cleared when they reach RefitSampleSize().
  LoadSample(r, kMaxRefitSample - 1, "variance sample", &variance_sample_);
  LoadSample(r, kMaxRefitSample - 1, "arrival sample", &arrival_sample_);
  variance_refitted_ = r.Bool();
  arrival_refitted_ = r.Bool();
  silent_ = r.Bool();
  has_reading_ = r.Bool();
  last_reading_ = r.Time("last reading time");
  regime_start_ = r.OptionalI64();
  if (r.ok() && regime_start_ &&
      (*regime_start_ < -SnapshotReader::kMaxTime || *regime_start_ > SnapshotReader::kMaxTime)) {
    return r.Fail("regime start is out of the time range");
  }
  if (!with_lengths) {
    // The ring of the last 256 observation times: a firing's length is the
    // number of them at or after its change_at, less those since it fired.
    std::array<EventTime, 256> recent{};
    for (EventTime& t : recent) t = r.Time("recent observation time");
    for (Firing& firing : firings_) {
      if (firing.observation < 0) continue;
      long long inside = 0;
      const long long available = std::min<long long>(observations_, recent.size());
      for (long long k = 0; k < available; ++k) {
        inside += recent[static_cast<size_t>(observations_ - k) % recent.size()] >=
                  firing.alarm.change_at;
      }
      firing.alarm.length = std::max(inside - (observations_ - firing.observation), 1LL);
    }
  }
  regime_observations_ = r.Counter("regime observations");
  value_sum_ = r.Finite("sum of readings");
  count_chart_decided_ = r.Bool();
  // (count, unfloored mean ratio) pairs, re-fitted and cleared at 2 RefitSampleSize()
  // values.
  count_sample_.resize(r.BoundedCount(8, 2 * kMaxRefitSample - 1, "count chart sample"));
  r.FiniteDoubles(count_sample_.data(), count_sample_.size(), "count chart sample");
  count_refitted_ = r.Bool();
  if (Status s = health_.Load(r); !s.ok()) return s;
  LoadSample(r, kMaxRefitSample - 1, "adapt_thresholds sample", &level_sample_);
  adapted_h_ = r.Finite("adapted threshold");
  settled_ = with_settled ? r.Bool() : true;
  // An older state has no recent z: the next firings keep their detector's
  // estimate until kChangeWindow readings are in.
  recent_count_ = 0;
  recent_z_.fill(0.0);
  recent_times_.fill(0);
  if (with_recent) {
    recent_count_ = r.U64();
    r.FiniteDoubles(recent_z_.data(), recent_z_.size(), "recent z");
    for (EventTime& t : recent_times_) t = r.Time("recent z time");
  }
  refit_hold_until_ = with_refit_hold ? r.Counter("refit hold") : 0;
  if (!r.ok()) return r.status();
  if (adapted_h_ > 0) {
    for (LevelDetector& d : level_) {
      if (Cusum* cusum = std::get_if<Cusum>(&d)) cusum->SetDecisionInterval(adapted_h_);
    }
  }
  return r.status();
}

}  // namespace plumbline
