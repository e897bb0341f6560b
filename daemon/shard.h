// Shards: the live engine of `serve`. A Shard is one thread that owns one
// Engine outright (and so every series routed to it); nothing else touches its
// series. Inputs hand it ReadingBatches through a bounded queue: when the queue
// is full, Push blocks the input (backpressure) instead of growing memory.
// Questions (the API's series views, a reload) are posted as tasks on a small
// separate queue, so they never wait behind backpressure, and answered on the
// shard thread.
//
// Time. Models and detectors run on event time, each series on its own: a
// reading past its series' silence deadline first reports that silence, at
// the deadline, as replay does (replay advances one clock for all series in
// merged time order; both give the same alerts for every silence that ends
// with a reading). Silence in live mode needs the wall clock: every `tick`
// the shard looks for series whose last reading arrived longer ago, on the
// monotonic clock, than their silence span (deadline - last reading), and
// reports them at
//
//   now_event = last event time + (clock.Now() - clock time it arrived)
//
// A live stream thus goes silent on the wall clock; a file of last month's
// readings fed at full speed gives replay's silences; and inputs that run at
// different speeds (two sites replaying history, one behind) never make each
// other's series look silent.
//
// Thread-safety: Push, Post, CloseInput and the accessors may be called from
// any thread; the ShardState handed to a task belongs to the shard thread.
#pragma once

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstddef>
#include <deque>
#include <functional>
#include <future>
#include <memory>
#include <mutex>
#include <optional>
#include <queue>
#include <string>
#include <string_view>
#include <thread>
#include <unordered_map>
#include <vector>

#include "config/config.h"
#include "daemon/clock.h"
#include "daemon/covariate_groups.h"
#include "daemon/engine.h"
#include "daemon/ingest_budget.h"
#include "daemon/pipeline_observer.h"
#include "daemon/reading_batch.h"
#include "daemon/series_trace.h"

namespace plumbline {

struct ShardOptions {
  std::size_t queue_batches = 64;     // bound of the input queue, in batches
  EventTime tick = kMicrosPerSecond;  // how often the wall clock is looked at (silence)
  // Readings kept per series, with their forecasts, for the status page
  // (oldest dropped; 0: none, and no forecast is computed per reading).
  std::size_t recent_points = 240;
  std::size_t recent_alerts = 32;  // alerts and events kept per series for the API
  EngineOptions engine;
  // Where Push logs each batch (daemon/write_ahead_log.h); null: no log.
  class WriteAheadLog* wal = nullptr;

  // Rules: queue_batches >= 1; tick positive; recent_points and recent_alerts
  // in [0, 4096]; engine valid.
  bool IsValid(std::string* why) const;
};

// Where a shard's alerts and events go (the dispatcher). Called on shard
// threads; may block while the dispatcher's queue is full (which in turn
// slows the inputs).
class AlertPublisher {
 public:
  virtual ~AlertPublisher() = default;
  // Takes the alerts out of *alerts (leaving it empty).
  virtual void Publish(std::size_t shard, std::vector<Alert>* alerts) = 0;
};

// What the shard keeps per series beside its monitor, for the API and the
// status page.
struct SeriesExtras {
  PointRing points;           // the last recent_points readings with forecasts
  std::vector<Alert> alerts;  // oldest first, at most recent_alerts
  long long readings = 0;     // accepted
  long long alert_count = 0;  // alerts raised (events of type alert), ever
  std::optional<EventTime> last_change_at;  // change_at of the latest alert
  // A level, variance or rate alert came and its retrain event has not yet
  // (the model is still learning the new regime).
  bool shifted = false;
  EventTime last_time = 0;
  double last_value = 0.0;
  EventTime newest = 0;    // newest event time accepted
  EventTime arrived = 0;   // clock time when the last reading was accepted
  bool scheduled = false;  // holds an entry in the silence queue

  // Counts an alert or event of this series into the fields above.
  void Note(const Alert& alert);
};

// Heterogeneous lookup by string_view: no string is built per reading.
struct SeriesNameHash {
  using is_transparent = void;
  std::size_t operator()(std::string_view name) const {
    return std::hash<std::string_view>{}(name);
  }
};
using SeriesExtrasMap =
    std::unordered_map<std::string, SeriesExtras, SeriesNameHash, std::equal_to<>>;

// A shard's state, as tasks see it on the shard thread.
class ShardState {
 public:
  ShardState(std::size_t index, const Config& config, const ShardOptions& options);

  std::size_t index() const { return index_; }
  const Engine& engine() const { return *engine_; }
  const Config& config() const { return config_; }
  // Every series this shard holds, by name.
  const SeriesExtrasMap& series() const { return extras_; }
  const SeriesExtras* Find(std::string_view name) const;

  // Replaces the profiles (SIGHUP), keeping the state of every series whose
  // profile settings did not change (Engine::Reconfigure). Events released
  // by restarted series are appended to *out.
  ReconfigureReport Reconfigure(const Config& config, std::vector<Alert>* out);

  // Checkpoints (daemon/checkpoint.h): appends a record per series to
  // *pieces, which hold them in order in pieces of about kCheckpointPiece
  // bytes (a shard's records are hundreds of megabytes: one string grown to
  // that size copied it over and over), and counts them in *count;
  // `wal_done` is Shard::WalDoneThrough.
  static constexpr std::size_t kCheckpointPiece = std::size_t{8} << 20;
  void SaveSeries(std::uint64_t wal_done, std::vector<std::string>* pieces,
                  std::uint64_t* count) const;
  // Restores one saved series (Engine::RestoreSeries) and what the shard kept
  // beside it; its silence clock restarts at clock time `now`.
  Status RestoreSeries(const struct CheckpointSeries& series, EventTime now,
                       ReconfigureReport* report);
  // Partition moves (daemon/kafka_input.h): appends a record (as SaveSeries
  // writes them, with wal_done 0) for each named series this shard holds, and
  // forgets series whose state another instance now owns.
  void SaveNamedSeries(const std::vector<std::string>& names, SnapshotWriter* w,
                       std::uint64_t* count) const;
  void ForgetSeries(const std::vector<std::string>& names);

 private:
  friend class Shard;
  // The record of one series; it views `engine_state`, which must outlive it.
  struct CheckpointSeries ToCheckpointSeries(const std::string& name,
                                             std::uint64_t wal_done,
                                             std::string_view engine_state) const;
  // Queues the series' wall-clock silence check, unless queued already or it
  // has no deadline now (then its next reading tries again).
  void ScheduleSilence(const std::string& name, SeriesExtras* extras);
  // Reports the silences due at clock time `now`.
  void CheckSilences(EventTime now, std::vector<Alert>* out);

  std::size_t index_;
  Config config_;
  ShardOptions options_;
  std::unique_ptr<Engine> engine_;
  SeriesExtrasMap extras_;
  // Wall-clock silence checks, earliest first, at most one per series: a
  // reading moves a series' due time later without a new entry; an entry that
  // comes due is re-queued at the current due time (or the silence fires).
  // The names point at extras_'s keys (stable; rebuilt after a reload).
  using SilenceEntry = std::pair<EventTime, const std::string*>;
  std::priority_queue<SilenceEntry, std::vector<SilenceEntry>, std::greater<>>
      silence_queue_;
};

class Shard {
 public:
  // `clock`, `publisher` and `observer` (may be null) must outlive the shard.
  // Precondition: options.IsValid().
  Shard(std::size_t index, const Config& config, ShardOptions options, const Clock* clock,
        AlertPublisher* publisher, PipelineObserver* observer);
  // Closes the input and joins the thread if still running.
  ~Shard();
  Shard(const Shard&) = delete;
  Shard& operator=(const Shard&) = delete;

  void Start();

  // Queues a batch (stamping handed_at), blocking while the queue is full.
  // False, leaving *batch as it was, once the input is closed.
  bool Push(ReadingBatch* batch);

  // Runs `task` on the shard thread before any further batch. Never blocks.
  // False when the shard has stopped (the task will not run).
  bool Post(std::function<void(ShardState&)> task);

  // Runs `question` on the shard thread; its answer comes through the future
  // (so several shards can be asked at once). Never blocks; nullopt when the
  // shard has stopped.
  template <typename Result>
  std::optional<std::future<Result>> AskLater(
      std::function<Result(ShardState&)> question) {
    auto promise = std::make_shared<std::promise<Result>>();
    std::future<Result> answer = promise->get_future();
    if (!Post([promise, question = std::move(question)](ShardState& state) {
          promise->set_value(question(state));
        })) {
      return std::nullopt;
    }
    return answer;
  }

  // Runs `question` on the shard thread and waits up to `timeout` for its
  // answer; nullopt on timeout or when the shard has stopped.
  template <typename Result>
  std::optional<Result> Ask(std::function<Result(ShardState&)> question,
                            std::chrono::milliseconds timeout) {
    std::optional<std::future<Result>> answer = AskLater(std::move(question));
    if (!answer || answer->wait_for(timeout) != std::future_status::ready) {
      return std::nullopt;
    }
    return answer->get();
  }

  // Looks at the wall clock now (as the periodic tick does). For tests.
  bool PostTick();

  // No more batches: the shard processes what is queued and the tasks posted,
  // calls Engine::Finish (releasing readings held for reordering, as replay
  // does at the end of input), publishes, and its thread ends.
  //
  // With a deadline (staged shutdown), batches still queued when it passes
  // are dropped, counted and logged, so that shutdown stays bounded however
  // slow the engine is; their tickets see them refused.
  void CloseInput(
      std::optional<std::chrono::steady_clock::time_point> deadline = std::nullopt);
  // Waits for the thread to end (after CloseInput).
  void Join();

  std::size_t index() const { return index_; }
  std::size_t queue_depth() const;
  std::size_t queue_capacity() const { return options_.queue_batches; }
  std::size_t series_count() const { return series_count_.load(); }
  // Readings processed (any verdict), for tests and logs.
  std::uint64_t processed() const { return processed_.load(); }
  // The write-ahead log sequence through which every batch this shard was
  // handed is in its state (its queue holds none at or before it). For
  // checkpoint tasks, on the shard thread.
  std::uint64_t WalDoneThrough() const;

 private:
  void Run();
  void Process(ReadingBatch& batch);
  void Tick();
  void Publish();

  const std::size_t index_;
  const ShardOptions options_;
  const Clock* const clock_;
  AlertPublisher* const publisher_;
  PipelineObserver* const observer_;
  ShardState state_;  // shard thread only

  mutable std::mutex mutex_;           // guards the queues and the flags below
  std::condition_variable not_empty_;  // the shard waits for work
  std::condition_variable not_full_;   // producers wait for room
  std::deque<ReadingBatch> batches_;
  std::deque<std::function<void(ShardState&)>> tasks_;
  bool input_closed_ = false;
  std::optional<std::chrono::steady_clock::time_point> drain_deadline_;
  bool stopped_ = false;
  std::uint64_t in_hand_ = 0;  // wal_sequence of the batch taken and not yet processed

  std::thread thread_;
  std::atomic<std::size_t> series_count_{0};
  std::atomic<std::uint64_t> processed_{0};

  EventTime last_tick_ = 0;  // shard thread only
  std::vector<Alert> out_;
};

// The set of shards and the stable routing of a series name to one of them:
// a series goes to the shard of its covariates (daemon/covariate_groups.h),
// any other by its own name. Thread-safe as Shard is.
class ShardSet {
 public:
  ShardSet(std::size_t count, const Config& config, const ShardOptions& options,
           const Clock* clock, AlertPublisher* publisher, PipelineObserver* observer);
  void Start();

  std::size_t size() const { return shards_.size(); }
  Shard& shard(std::size_t i) { return *shards_[i]; }
  // FNV-1a of the series' route key (its own name unless covariates tie it
  // to others: CovariateGroups::RouteKey), modulo the shard count: the same
  // shard for a name in every run with the same shard count and covariate
  // relations, and one shard for a series and the covariates it reads.
  std::size_t ShardFor(std::string_view series) const;
  // The covariate groups of the config the set started with. They stay for
  // the set's life: a reload does not move running series between shards.
  const CovariateGroups& groups() const { return groups_; }

  // Closes every shard's input and joins them all.
  void CloseAndJoin(
      std::optional<std::chrono::steady_clock::time_point> deadline = std::nullopt);

  // The ingest memory budget that routers take batch bytes from (null: none).
  // Set before any input starts; it must outlive the routers' batches.
  void set_budget(IngestBudget* budget) { budget_ = budget; }
  IngestBudget* budget() const { return budget_; }

 private:
  std::vector<std::unique_ptr<Shard>> shards_;
  const CovariateGroups groups_;
  IngestBudget* budget_ = nullptr;
};

// Batches one producer's readings per shard and pushes full batches (blocking
// while a shard's queue is full). Owned by one producer: not thread-safe.
class ShardRouter {
 public:
  // `ticket` (may be null) is attached to every batch and told of each one.
  // Each batch takes its bytes from the shards' budget before it is pushed
  // (waiting while the budget is full; `input` names the waiter in the
  // overload counter), unless `prepaid` holds them already: then every batch
  // carries that lease instead.
  explicit ShardRouter(ShardSet* shards, std::shared_ptr<IngestTicket> ticket = nullptr,
                       std::shared_ptr<IngestLease> prepaid = nullptr,
                       std::string_view input = "tcp");
  ~ShardRouter();  // flushes

  // Adds one reading; pushes its shard's batch when full. False once the
  // shards no longer take input (the reading is then dropped).
  bool Add(const Reading& reading, std::uint64_t line);
  // Pushes every non-empty batch. False if any shard refused.
  bool Flush();
  std::uint64_t routed() const { return routed_; }
  // Acknowledged mode: batches carry this stream name into the write-ahead log.
  void set_stream(std::string stream) { stream_ = std::move(stream); }
  // The highest write-ahead log sequence of the batches pushed so far.
  std::uint64_t last_wal_sequence() const { return last_wal_sequence_; }

 private:
  bool PushBatch(std::size_t shard);

  ShardSet* shards_;
  std::shared_ptr<IngestTicket> ticket_;
  std::shared_ptr<IngestLease> prepaid_;
  std::string_view input_;
  std::vector<ReadingBatch> batches_;  // index: shard
  std::string stream_;
  std::uint64_t last_wal_sequence_ = 0;
  std::uint64_t routed_ = 0;
  bool closed_ = false;
};

}  // namespace plumbline
