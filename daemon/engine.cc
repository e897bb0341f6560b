#include "daemon/engine.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <mutex>

#include "daemon/text.h"
#include "detectors/glob.h"
#include "detectors/prefetch.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

void AppendNumber(std::string* out, double value) {
  if (!std::isfinite(value)) {
    *out += "null";
    return;
  }
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%.6g", value);
  *out += buffer;
}

}  // namespace

std::string_view ToString(IngestOutcome outcome) {
  switch (outcome) {
    case IngestOutcome::kAccepted:
      return "accepted";
    case IngestOutcome::kLate:
      return "late";
    case IngestOutcome::kNoProfile:
      return "no_profile";
    case IngestOutcome::kNotFinite:
      return "non_finite_value";
    case IngestOutcome::kTooManySeries:
      return "too_many_series";
  }
  return "accepted";
}

bool EngineOptions::IsValid(std::string* why) const {
  if (max_series < 1) {
    if (why) *why = "max_series must be >= 1";
    return false;
  }
  return true;
}

// The annotations whose glob matches a series name, in config order.
std::vector<Annotation> AnnotationsFor(const Config& config, std::string_view name) {
  std::vector<Annotation> out;
  for (const Annotation& a : config.annotations) {
    if (GlobMatch(a.match, name)) out.push_back(a);
  }
  return out;
}

std::string AlertToJson(const Alert& a) {
  std::string out = "{\"id\":";
  AppendJsonString(a.id, &out);
  out += ",\"event\":";
  AppendJsonString(ToString(a.event), &out);
  out += ",\"series\":";
  AppendJsonString(a.series, &out);
  out += ",\"kind\":";
  AppendJsonString(ToString(a.kind), &out);
  out += ",\"direction\":";
  AppendJsonString(ToString(a.direction), &out);
  out += ",\"detected_at\":";
  AppendJsonString(FormatRfc3339(a.detected_at), &out);
  out += ",\"change_at\":";
  AppendJsonString(FormatRfc3339(a.change_at), &out);
  out += ",\"detectors\":[";
  for (size_t i = 0; i < a.detectors.size(); ++i) {
    if (i) out += ',';
    AppendJsonString(a.detectors[i], &out);
  }
  out += ']';
  if (a.event == EventType::kRetrain) {
    out += ",\"retrain_from\":";
    AppendJsonString(FormatRfc3339(a.change_at), &out);
    out += ",\"retrain_to\":";
    AppendJsonString(FormatRfc3339(a.window_to), &out);
  } else if (a.event == EventType::kAlert && a.kind == AlertKind::kLevel) {
    out += ",\"magnitude\":";
    AppendNumber(&out, a.magnitude);
    out += ",\"magnitude_sd\":";
    AppendNumber(&out, a.magnitude_sd);
    out += ",\"before\":";
    AppendNumber(&out, a.before);
    out += ",\"after\":";
    AppendNumber(&out, a.after);
  } else if (a.event == EventType::kAlert && a.kind == AlertKind::kVariance) {
    out += ",\"sd_ratio\":";
    AppendNumber(&out, a.magnitude);
    out += ",\"sd_before\":";
    AppendNumber(&out, a.before);
    out += ",\"sd_after\":";
    AppendNumber(&out, a.after);
  } else if (a.kind == AlertKind::kSilence) {
    out += ",\"silent_seconds\":";
    AppendNumber(&out, a.magnitude);
  } else if (a.event == EventType::kAlert && a.kind == AlertKind::kRate) {
    out += ",\"mean_gap_seconds_before\":";
    AppendNumber(&out, a.before);
  } else if (a.event == EventType::kMeterReset) {
    out += ",\"total_before\":";
    AppendNumber(&out, a.before);
    out += ",\"total_after\":";
    AppendNumber(&out, a.after);
  }
  if (!a.annotation.empty()) {
    out +=
        a.event == EventType::kSuppressed ? ",\"suppressed_by\":" : ",\"explained_by\":";
    AppendJsonString(a.annotation, &out);
  }
  out += ",\"severity\":";
  AppendJsonString(ToString(a.severity), &out);
  out += ",\"advisory\":true}";
  return out;
}

std::string AlertToText(const Alert& a) {
  std::string out = FormatRfc3339(a.detected_at);
  out += "  ";
  if (a.event != EventType::kAlert) {
    out += ToString(a.event);
    out += "  ";
    out += a.series;
    if (a.event == EventType::kRetrain) {
      out += "  retrain on " + FormatRfc3339(a.change_at) + " .. " +
             FormatRfc3339(a.window_to);
    } else if (a.event == EventType::kSuppressed) {
      out += "  " + std::string(ToString(a.kind)) + " held back by " + a.annotation;
    }
    return out;
  }
  std::string kind(ToString(a.kind));
  if (a.direction != Direction::kNone)
    kind += a.direction == Direction::kUp ? " up" : " down";
  kind.resize(std::max<size_t>(kind.size(), 13), ' ');
  out += kind + " " + a.series + "  from " + FormatRfc3339(a.change_at);
  char buffer[96];
  if (a.kind == AlertKind::kLevel) {
    std::snprintf(buffer, sizeof buffer, "  %+.4g (%+.1f sd), %.4g -> %.4g", a.magnitude,
                  a.magnitude_sd, a.before, a.after);
    out += buffer;
  } else if (a.kind == AlertKind::kVariance) {
    std::snprintf(buffer, sizeof buffer, "  sd x%.2f", a.magnitude);
    out += buffer;
  } else if (a.kind == AlertKind::kSilence) {
    out +=
        "  no reading for " + FormatDuration(static_cast<EventTime>(a.magnitude * 1e6));
  }
  if (!a.detectors.empty()) {
    out += "  [";
    for (size_t i = 0; i < a.detectors.size(); ++i)
      out += (i ? "," : "") + a.detectors[i];
    out += "]";
  }
  if (!a.annotation.empty()) out += "  (expected: " + a.annotation + ")";
  return out;
}

// The names every profile lists as covariates.
static std::vector<std::string> CovariateNames(const Config& config) {
  std::vector<std::string> wanted;
  for (const ProfileOptions& profile : config.series) {
    wanted.insert(wanted.end(), profile.covariates.begin(), profile.covariates.end());
  }
  return wanted;
}

Engine::Engine(Config config, EngineOptions options)
    : config_(std::move(config)), options_(std::move(options)) {
  designs_.resize(config_.series.size());
  covariates_ = std::make_unique<CovariateBoard>(CovariateNames(config_));
}

void Engine::StartMonitor(Series* series) {
  series->monitor = std::make_unique<SeriesMonitor>(series->design);
  Wire(series);
}

Engine::Series* Engine::Adopt(std::unique_ptr<Series> series) {
  Series* raw = series.get();
  auto [it, inserted] = series_.try_emplace(raw->name);
  if (!inserted) index_.Erase(it->second.get());
  it->second = std::move(series);
  index_.Insert(raw);
  if (!inserted) RescheduleAll();  // the queue may name the series replaced
  return raw;
}

void Engine::RescheduleAll() {
  deadlines_ = {};
  for (auto& [name, series] : series_) {
    series->scheduled.reset();
    Schedule(series.get());
  }
}

bool Engine::Drop(std::string_view name) {
  Series* series = Lookup(name);
  if (!series) return false;
  index_.Erase(series);
  series_.erase(series_.find(name));
  return true;
}

void Engine::Wire(Series* series) {
  series->monitor->SetAnnotations(AnnotationsFor(config_, series->name));
  series->monitor->SetObservationListener(
      listener_ && series->name == listened_series_ ? listener_ : nullptr);
  CovariateBoard* board = covariates_.get();
  series->monitor->ConnectCovariates(board, board->Wants(series->name) ? board : nullptr,
                                     series->name);
}

void Engine::SetObservationListener(std::string series, ObservationListener* listener) {
  listened_series_ = std::move(series);
  listener_ = listener;
  if (Series* series = Lookup(listened_series_); series && series->monitor)
    series->monitor->SetObservationListener(listener_);
}

const ProfileDesign* Engine::DesignFor(const ProfileOptions* profile) {
  const size_t index = static_cast<size_t>(profile - config_.series.data());
  if (!designs_[index]) {
    auto design = options_.make_design ? options_.make_design(*profile)
                                       : ProfileDesign::Make(*profile);
    if (!design.ok()) {
      if (design_status_.ok()) design_status_ = design.status();
      return nullptr;
    }
    designs_[index] = std::make_unique<ProfileDesign>(std::move(design).value());
  }
  return designs_[index].get();
}

IngestOutcome Engine::Ingest(std::string_view name, EventTime time, double value,
                             std::vector<Alert>* out) {
  if (!std::isfinite(value)) return IngestOutcome::kNotFinite;
  Series* series = Lookup(name);
  if (!series) {
    if (series_.size() >= options_.max_series) return IngestOutcome::kTooManySeries;
    const ProfileOptions* profile = MatchProfile(config_, name);
    if (!profile) return IngestOutcome::kNoProfile;
    const ProfileDesign* design = DesignFor(profile);
    if (!design) return IngestOutcome::kNoProfile;
    auto fresh = std::make_unique<Series>();
    fresh->name = std::string(name);
    fresh->design = design;
    StartMonitor(fresh.get());
    series = Adopt(std::move(fresh));
  }
  scratch_.clear();
  // The series' own event clock: a reading past its silence deadline shows
  // the silence first (replay's AdvanceClock before this reading has already
  // reported it, so this changes nothing there; serve relies on it).
  if (const auto deadline = series->monitor->silence_deadline();
      deadline && time >= *deadline) {
    series->monitor->AdvanceClock(time, &scratch_);
  }
  const ReadingVerdict verdict = series->monitor->Observe(time, value, &scratch_);
  Emit(*series, scratch_, out);
  if (verdict == ReadingVerdict::kLate) return IngestOutcome::kLate;
  if (verdict == ReadingVerdict::kNotFinite) return IngestOutcome::kNotFinite;
  Schedule(series);
  return IngestOutcome::kAccepted;
}

void Engine::Schedule(Series* series) {
  const auto deadline = series->monitor->silence_deadline();
  if (!deadline) return;
  // A later deadline waits for the queued entry; an earlier one (rare: the
  // adaptive timeout can shrink) needs an entry of its own.
  if (!series->scheduled || *deadline < *series->scheduled) {
    deadlines_.emplace(*deadline, series);
    series->scheduled = deadline;
  }
}

void Engine::AdvanceClock(EventTime now, std::vector<Alert>* out,
                          std::vector<EventTime>* keys) {
  while (!deadlines_.empty() && deadlines_.top().first <= now) {
    auto [queued, series] = deadlines_.top();
    deadlines_.pop();
    if (series->scheduled != queued) continue;  // superseded by an earlier entry
    series->scheduled.reset();
    const auto deadline = series->monitor->silence_deadline();
    if (!deadline) continue;
    if (*deadline > now) {  // readings came since: wait for the current deadline
      deadlines_.emplace(*deadline, series);
      series->scheduled = deadline;
      continue;
    }
    scratch_.clear();
    series->monitor->AdvanceClock(now, &scratch_);
    const std::size_t before = out->size();
    Emit(*series, scratch_, out);
    if (keys) keys->insert(keys->end(), out->size() - before, queued);
  }
}

void Engine::AdvanceSeriesClock(std::string_view name, EventTime now,
                                std::vector<Alert>* out) {
  Series* series = Lookup(name);
  if (!series) return;
  scratch_.clear();
  series->monitor->AdvanceClock(now, &scratch_);
  Emit(*series, scratch_, out);
}

void Engine::Finish(std::vector<Alert>* out) {
  std::vector<Series*> by_name;
  by_name.reserve(series_.size());
  for (auto& [name, series] : series_) by_name.push_back(series.get());
  std::sort(by_name.begin(), by_name.end(),
            [](const Series* a, const Series* b) { return a->name < b->name; });
  for (Series* series : by_name) {
    scratch_.clear();
    series->monitor->Flush(&scratch_);
    Emit(*series, scratch_, out);
  }
}

// A key added to ProfileOptions must be compared here too; the
// size check below trips when one is added (on the 64-bit Linux build), as a
// reminder, after which update the size.
static_assert(sizeof(void*) != 8 || sizeof(ProfileOptions) == 272,
              "ProfileOptions changed: compare the new key in SameProfileSettings, then "
              "update 272");
bool SameProfileSettings(const ProfileOptions& a, const ProfileOptions& b) {
  return a.kind == b.kind && a.seasons == b.seasons && a.gaps == b.gaps &&
         a.warmup == b.warmup && a.arl0 == b.arl0 && a.shift == b.shift &&
         a.detectors == b.detectors && a.agree == b.agree &&
         a.silence_after == b.silence_after && a.harmonics == b.harmonics &&
         a.every == b.every && a.memory == b.memory && a.trend == b.trend &&
         a.level_noise == b.level_noise && a.level_noise_auto == b.level_noise_auto &&
         a.lateness == b.lateness && a.agree_within == b.agree_within &&
         a.cooldown == b.cooldown && a.covariates == b.covariates &&
         a.covariate_max_age == b.covariate_max_age && a.count_chart == b.count_chart &&
         a.adapt_thresholds == b.adapt_thresholds;
}

bool SameModelSettings(const ProfileOptions& a, const ProfileOptions& b) {
  return a.kind == b.kind && a.seasons == b.seasons && a.harmonics == b.harmonics &&
         a.gaps == b.gaps && a.every == b.every && a.memory == b.memory &&
         a.trend == b.trend && a.level_noise == b.level_noise &&
         a.level_noise_auto == b.level_noise_auto && a.lateness == b.lateness &&
         a.covariates == b.covariates && a.covariate_max_age == b.covariate_max_age;
}

ReconfigureReport Engine::Reconfigure(Config config, std::vector<Alert>* out) {
  ReconfigureReport report;
  for (auto& design : designs_) {
    if (design) retired_designs_.push_back(std::move(design));
  }
  config_ = std::move(config);
  covariates_->SetWanted(CovariateNames(config_));
  designs_.clear();
  designs_.resize(config_.series.size());
  // Calibrated designs pass to new profiles with the same settings.
  for (std::size_t j = 0; j < config_.series.size(); ++j) {
    for (auto& design : retired_designs_) {
      if (design && SameProfileSettings(design->profile, config_.series[j])) {
        designs_[j] = std::move(design);
        break;
      }
    }
  }
  for (auto it = series_.begin(); it != series_.end();) {
    Series& series = *it->second;
    const ProfileOptions* profile = MatchProfile(config_, series.name);
    if (profile && SameProfileSettings(series.design->profile, *profile)) {
      Wire(&series);  // annotations and covariate publishing may have changed
      ++report.kept;
      ++it;
      continue;
    }
    if (profile && SameModelSettings(series.design->profile, *profile)) {
      if (const ProfileDesign* design = DesignFor(profile)) {
        series.design = design;
        series.monitor->Retune(design);
        Wire(&series);
        ++report.retuned;
        ++it;
        continue;
      }
    }
    scratch_.clear();
    series.monitor->Flush(&scratch_);
    Emit(series, scratch_, out);
    const ProfileDesign* design = profile ? DesignFor(profile) : nullptr;
    if (!design) {
      ++report.dropped;
      index_.Erase(&series);
      it = series_.erase(it);
      continue;
    }
    series.design = design;
    StartMonitor(&series);
    ++report.restarted;
    ++it;
  }
  // Free the retired designs no series uses any more.
  std::erase_if(retired_designs_, [this](const std::unique_ptr<ProfileDesign>& design) {
    if (!design) return true;
    for (const auto& [name, series] : series_) {
      if (series->design == design.get()) return false;
    }
    return true;
  });
  RescheduleAll();  // deadlines may name dropped or restarted series
  return report;
}

void Engine::Emit(const Series& series, const std::vector<SeriesEvent>& events,
                  std::vector<Alert>* out) {
  for (const SeriesEvent& e : events) {
    Alert a;
    a.series = series.name;
    a.event = e.type;
    a.kind = e.kind;
    a.direction = e.direction;
    a.detected_at = e.detected_at;
    a.change_at = e.change_at;
    a.window_to = e.window_to;
    for (DetectorKind d : {DetectorKind::kCusum, DetectorKind::kPageHinkley,
                           DetectorKind::kBocpd, DetectorKind::kEwma}) {
      if (e.detectors & (1u << static_cast<int>(d)))
        a.detectors.emplace_back(ToString(d));
    }
    if (e.kind == AlertKind::kVariance && e.type == EventType::kAlert) {
      a.detectors.emplace_back("variance-cusum");
    } else if (e.kind == AlertKind::kRate && e.type == EventType::kAlert) {
      a.detectors.emplace_back("arrival-cusum");
    } else if (e.kind == AlertKind::kSilence && e.type == EventType::kAlert) {
      a.detectors.emplace_back("silence-timer");
    }
    a.magnitude = e.magnitude;
    a.magnitude_sd = e.magnitude_sd;
    a.before = e.before;
    a.after = e.after;
    a.annotation = e.annotation;
    a.severity = SeverityOf(e);
    // Fields joined by a NUL byte (which no field contains), so no two
    // different field lists hash the same text.
    const std::string fields = a.series + '\0' + std::string(ToString(a.event)) + '\0' +
                               std::string(ToString(a.kind)) + '\0' +
                               std::to_string(a.detected_at) + '\0' +
                               std::to_string(a.change_at);
    const std::uint64_t h = Fnv1a(fields);
    char id[17];
    std::snprintf(id, sizeof id, "%016llx", static_cast<unsigned long long>(h));
    a.id = id;
    out->push_back(std::move(a));
  }
}

void Engine::Prefetch(std::string_view series, EventTime time) const {
  if (const Series* found = Lookup(series); found && found->monitor) {
    found->monitor->Prefetch(time);
  }
}

void Engine::PrefetchStage(int stage, std::string_view series) const {
  switch (stage) {
    case 4:
      index_.PrefetchSlot(series);
      return;
    case 3:
      index_.PrefetchItem(series);
      return;
    case 2:
      if (const Series* found = Lookup(series); found && found->monitor) {
        PrefetchRange(found->monitor.get(), sizeof(SeriesMonitor));
      }
      return;
    default:
      return;
  }
}

const SeriesMonitor* Engine::Find(std::string_view name) const {
  const Series* series = Lookup(name);
  return series ? series->monitor.get() : nullptr;
}

}  // namespace plumbline
