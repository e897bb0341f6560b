// Engine: routes readings to per-series monitors (one per series name, with the
// profile of the first matching glob) and turns their events into alerts with
// stable ids. It does no I/O and reads no clock: `replay` drives it on event
// time, `serve` (one engine per shard) on event time plus the wall clock for
// silence. Not thread-safe; owned by one shard.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <optional>
#include <queue>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "config/config.h"
#include "daemon/name_index.h"
#include "detectors/covariate.h"
#include "detectors/series_monitor.h"
#include "detectors/severity.h"
#include "detectors/status.h"

namespace plumbline {

// One line of the alert log (or of the event log, for non-alert events).
struct Alert {
  std::string id;  // stable: a hash of series, event, kind, detected_at and change_at
  std::string series;
  EventType event = EventType::kAlert;
  AlertKind kind = AlertKind::kLevel;
  Direction direction = Direction::kNone;
  EventTime detected_at = 0;
  EventTime change_at = 0;
  EventTime window_to = 0;  // retrain events only
  std::vector<std::string> detectors;
  double magnitude = 0.0;
  double magnitude_sd = 0.0;
  double before = 0.0;
  double after = 0.0;
  // The annotation (config `annotations`) that explains this alert, or for a
  // suppressed event the maintenance window that held it back; else empty.
  std::string annotation;
  // How urgent (detectors/severity.h): from the detectors that agreed, the
  // magnitude and any explanation. Sinks may drop those below their minimum.
  Severity severity = Severity::kRecord;
};

// One JSON object, no trailing newline. Guaranteed fields (DESIGN.md): series,
// detected_at, change_at, kind, direction, detectors; plus id, event, and the
// magnitudes that apply to the kind, severity, and explained_by / suppressed_by.
std::string AlertToJson(const Alert& alert);
// One readable line: "2026-03-19T14:02:00Z  level ↑  coldstore/... change began ...".
std::string AlertToText(const Alert& alert);

enum class IngestOutcome { kAccepted, kLate, kNoProfile, kNotFinite, kTooManySeries };
std::string_view ToString(IngestOutcome outcome);

// What Engine::Reconfigure did to the series it held.
struct ReconfigureReport {
  std::size_t kept = 0;       // same profile settings: model and detectors carry on
  std::size_t retuned = 0;    // new thresholds only: the model carries on, detectors anew
  std::size_t restarted = 0;  // settings changed: the series starts learning again
  std::size_t dropped = 0;    // no profile matches it any more: forgotten
};

// Makes a profile's design (calibration: up to a fraction of a second).
using DesignMaker = std::function<StatusOr<ProfileDesign>(const ProfileOptions& profile)>;

// Whether two profiles model and watch a series the same way: every setting
// but `match` (the rule Reconfigure keeps series by).
bool SameProfileSettings(const ProfileOptions& a, const ProfileOptions& b);
// Whether two profiles model a series the same way (kind, seasons, harmonics,
// gaps, every, memory, trend, level_noise, lateness), whatever their
// thresholds: a series can then be retuned instead of restarted.
bool SameModelSettings(const ProfileOptions& a, const ProfileOptions& b);

struct EngineOptions {
  std::size_t max_series = 1'000'000;  // new series beyond this are refused
  // Empty: ProfileDesign::Make. serve shares one memoizing maker among its
  // shards, so each profile is calibrated once; a shared one must be
  // thread-safe.
  DesignMaker make_design;
  bool IsValid(std::string* why) const;
};

class Engine {
 public:
  // Calibrates nothing yet: each profile is designed on its first series.
  Engine(Config config, EngineOptions options = {});

  // Feeds one reading; any resulting events are appended to *out. Readings of a
  // series must come in time order, up to its profile's `lateness`.
  IngestOutcome Ingest(std::string_view series, EventTime time, double value,
                       std::vector<Alert>* out);
  // Reports silences due at `now` (one clock for every series: replay's), in
  // the order of their queued deadlines, ties by series name. If `keys` is
  // given, the queued deadline of each alert appended is appended to it, so
  // engines that split the series between them can merge their silences back
  // into this order (replay --threads).
  void AdvanceClock(EventTime now, std::vector<Alert>* out,
                    std::vector<EventTime>* keys = nullptr);
  // Reports the silence of one series if due at `now` (its own clock: serve,
  // where independent inputs run at different speeds). Unknown names are
  // ignored. Ingest itself reports a series' silence when a reading of it
  // comes past its deadline.
  void AdvanceSeriesClock(std::string_view series, EventTime now,
                          std::vector<Alert>* out);
  // End of input: releases readings held for reordering, series by series in
  // name order.
  void Finish(std::vector<Alert>* out);
  // Replaces the profiles (a reload) without losing series state: a series
  // whose matching profile has the same settings as before (every key but
  // `match`) keeps its monitor; one whose model settings are the same but
  // whose thresholds changed (SameModelSettings) keeps its model and gets new
  // detectors (SeriesMonitor::Retune); one whose model settings changed is
  // flushed and starts again under its new profile; one that no profile
  // matches any more is flushed and forgotten. Events from the flushes are
  // appended to *out.
  ReconfigureReport Reconfigure(Config config, std::vector<Alert>* out);

  // Checkpoints (daemon/checkpoint.h). Calls `each(name, state)` for every
  // series; `state` holds the profile settings it runs under and its monitor
  // (detectors/snapshot.h encoding), and is valid during the call.
  void SaveSeries(const std::function<void(const std::string& name,
                                           std::string_view state)>& each) const;
  // Restores one series saved by SaveSeries, judged against the profile that
  // matches its name now as Reconfigure judges a reload: same settings, kept;
  // same model settings, retuned; otherwise restarted (it learns afresh from
  // its next reading); no profile, dropped. The outcome is counted in
  // *report. Corruption when the state does not parse or fit (the series is
  // then left out).
  Status RestoreSeries(std::string_view name, std::string_view state,
                       ReconfigureReport* report);
  // Partition moves (daemon/kafka_input.h): one series' state as SaveSeries
  // gives it (nullopt when the engine holds no such series), and forgetting
  // series whose state now belongs to another instance (no events).
  std::optional<std::string> SaveOneSeries(std::string_view name) const;
  void ForgetSeries(const std::vector<std::string>& names);
  // The covariate observations this engine holds of `name` (empty when no
  // profile names it as a covariate), and their restoration (kept only when
  // some profile names it now). A series and the covariates it reads live in
  // one engine (serve routes them to one shard: daemon/shard.h), so a
  // checkpoint saves them with the covariate's series record.
  std::vector<CovariateObservation> CovariateHistory(std::string_view name) const;
  void RestoreCovariateHistory(std::string_view name,
                               const std::vector<CovariateObservation>& history);

  std::size_t series_count() const { return series_.size(); }
  const SeriesMonitor* Find(std::string_view series) const;
  // Starts loading the state a reading of `series` at `time` will touch into
  // the caches (SeriesMonitor::Prefetch); a hint that changes nothing. Once the
  // series outgrow the caches each reading waits on memory for its series'
  // state; callers that hold the next readings (replay's parsed chunk, a
  // shard's batch) call it kPrefetchAhead readings ahead to overlap the waits.
  void Prefetch(std::string_view series, EventTime time) const;
  // Far enough ahead that the loads finish before the reading is reached (a
  // reading takes a few microseconds), near enough that they are not evicted
  // first; 4, 8 and 16 measured alike on 10,000 series.
  static constexpr std::size_t kPrefetchAhead = 8;
  // Prefetch and the stages before it, for the readings ahead of the one
  // about to be ingested: `ahead(n)` gives the series name and time of the
  // reading n places on, or nullopt past the readings the caller holds. Each
  // stage loads what the next one reads, so no stage waits on memory: the
  // index slot at 4 kPrefetchAhead, the series' entry at 3, its monitor at 2,
  // then Prefetch at kPrefetchAhead. On a 10 M-reading replay over 10,000
  // series, 5-22% less CPU than Prefetch alone (five interleaved pairs),
  // alerts the same.
  using NameAndTime = std::pair<std::string_view, EventTime>;
  template <typename Ahead>
  void PrefetchAhead(Ahead ahead) const {
    for (int stage = 4; stage >= 2; --stage) {
      if (const auto r = ahead(stage * kPrefetchAhead)) PrefetchStage(stage, r->first);
    }
    if (const auto r = ahead(kPrefetchAhead)) Prefetch(r->first, r->second);
  }
  // Tells `listener` (not owned; null: nobody) of every observation of the
  // series named `series`, now and after it is created or restarted.
  void SetObservationListener(std::string series, ObservationListener* listener);
  // The first profile-design failure, if any (a profile that cannot be calibrated).
  const Status& design_status() const { return design_status_; }

 private:
  // One of PrefetchAhead's earlier stages (4, 3 or 2) for `series`.
  void PrefetchStage(int stage, std::string_view series) const;
  struct Series {
    std::string name;
    const ProfileDesign* design = nullptr;  // in designs_ or retired_designs_
    std::unique_ptr<SeriesMonitor> monitor;
    std::optional<EventTime> scheduled;  // its entry in deadlines_, if any
  };
  const ProfileDesign* DesignFor(const ProfileOptions* profile);
  void Emit(const Series& series, const std::vector<SeriesEvent>& events,
            std::vector<Alert>* out);
  void Schedule(Series* series);
  // A monitor for `series` under its design, with its annotations and covariates.
  void StartMonitor(Series* series);
  // Gives a series' monitor the annotations and covariates the config holds now.
  void Wire(Series* series);
  // The series named `name`, or nullptr: one probe of index_.
  Series* Lookup(std::string_view name) const { return index_.Find(name); }
  // Takes `series` in, replacing any series of the same name; returns it.
  Series* Adopt(std::unique_ptr<Series> series);
  // Drops the series named `name`; true if there was one.
  bool Drop(std::string_view name);
  // Rebuilds the deadline queue from the series there are (after some went).
  void RescheduleAll();

  Config config_;
  EngineOptions options_;
  // The observations of the series some profile names as a covariate; on the
  // heap so that the monitors' pointers to it stay valid, and declared before
  // the series so that it outlives their monitors.
  std::unique_ptr<CovariateBoard> covariates_;
  std::vector<std::unique_ptr<ProfileDesign>> designs_;  // index: profile index
  // Designs of replaced profiles that kept series still use (after Reconfigure).
  std::vector<std::unique_ptr<ProfileDesign>> retired_designs_;
  // Transparent hashing: a lookup by string_view needs no string per reading.
  struct NameHash {
    using is_transparent = void;
    std::size_t operator()(std::string_view name) const {
      return std::hash<std::string_view>{}(name);
    }
  };
  // Owns the series; iteration (checkpoints, flushes) follows its order.
  std::unordered_map<std::string, std::unique_ptr<Series>, NameHash, std::equal_to<>>
      series_;
  // The same series, for the per-reading lookup (daemon/name_index.h).
  NameIndex<Series> index_;
  // Silence deadlines, earliest first, about one entry per series: a reading
  // moves a series' deadline later without a new entry; when the old entry
  // comes due it is re-queued at the current deadline (or the silence fires).
  using Deadline = std::pair<EventTime, Series*>;
  // Earliest first; ties by name, so the order does not depend on addresses.
  struct LaterDeadline {
    bool operator()(const Deadline& a, const Deadline& b) const {
      return a.first != b.first ? a.first > b.first : a.second->name > b.second->name;
    }
  };
  std::priority_queue<Deadline, std::vector<Deadline>, LaterDeadline> deadlines_;
  std::vector<SeriesEvent> scratch_;
  Status design_status_;
  std::string listened_series_;
  ObservationListener* listener_ = nullptr;
};

}  // namespace plumbline
