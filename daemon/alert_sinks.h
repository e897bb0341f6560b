// Where alerts go once a shard raises them. The AlertDispatcher takes alert
// batches from the shards through a bounded queue and, on its own thread, hands
// them to each sink in turn and keeps a bounded ring of recent alerts for the
// API. Sinks:
//
//   AlertLog      JSON lines (AlertToJson), appended once per batch (readers
//                 of the file see a batch at once) and fsynced by its own
//                 thread, one fsync for every batch appended meanwhile (group
//                 commit), so a slow disk never holds the next batch or the
//                 other sinks back; Flush waits for the fsync (a checkpoint
//                 does before it counts the alerts as delivered). The first
//                 failure is sticky: it is logged once, counted, shown by
//                 Healthy() (and so on /readyz), and nothing more is written.
//   StdoutSink    one readable line per alert (AlertToText), flushed.
//   WebhookSink   an HTTP POST of each alert as one JSON object, from its own
//                 thread and bounded queue, so a slow or dead receiver never
//                 blocks the dispatcher (and so never the shards). Each alert
//                 is tried up to `attempts` times with exponential backoff and
//                 jitter; then it goes to the dead-letter file, as does an alert
//                 that finds the queue full. Alerts leave in order: the head
//                 of the queue is retried before the next is sent.
//
// Routing: each sink may take only alerts of at least a minimum severity
// (config sinks.*.min_severity), so the webhook can page while the log keeps all.
//
// Thread-safety: AlertDispatcher::Publish, Recent and Healthy may be called from
// any thread; sinks' Deliver is called on the dispatcher thread only;
// Healthy may be called from any thread.
#pragma once

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstddef>
#include <cstdint>
#include <deque>
#include <functional>
#include <memory>
#include <mutex>
#include <random>
#include <string>
#include <string_view>
#include <thread>
#include <vector>

#include "config/service_options.h"
#include "daemon/engine.h"
#include "daemon/file_system.h"
#include "daemon/pipeline_observer.h"
#include "daemon/shard.h"
#include "detectors/status.h"

namespace plumbline {

class AlertSink {
 public:
  virtual ~AlertSink() = default;
  // For logs and metrics: alert_log, stdout, webhook.
  virtual std::string_view name() const = 0;
  // Takes one batch (dispatcher thread).
  virtual void Deliver(const std::vector<Alert>& alerts) = 0;
  // Staged shutdown: deliver what is pending until `deadline`, then give up
  // durably where the sink can (the webhook's dead-letter file).
  virtual void Drain(std::chrono::steady_clock::time_point /*deadline*/) {}
  // Hands what the sink holds to its destination, waiting up to `deadline`
  // (the Kafka sink's producer queue); false when something is still held.
  // Called by the Kafka input before it saves partition state, from its own
  // thread: a sink that holds alerts must make this safe beside Deliver.
  virtual bool Flush(std::chrono::steady_clock::time_point /*deadline*/) { return true; }
  // False, with the reason in *why, while a durable write has failed.
  virtual bool Healthy(std::string* /*why*/) const { return true; }
};

class AlertLog : public AlertSink {
 public:
  // Opens (creating) `path` for appending and starts the fsync thread. On
  // failure to open the sink is unhealthy from the start.
  AlertLog(std::string path, FileSystem* file_system, PipelineObserver* observer);
  ~AlertLog() override;  // a last fsync, then the file is closed
  std::string_view name() const override { return "alert_log"; }
  // Appends the batch; the fsync follows on the log's own thread.
  void Deliver(const std::vector<Alert>& alerts) override;
  // Waits until every batch appended before the call is fsynced (or the log
  // has failed: a failed log holds nothing back, and says so in Healthy).
  // False when `deadline` came first.
  bool Flush(std::chrono::steady_clock::time_point deadline) override;
  void Drain(std::chrono::steady_clock::time_point deadline) override { Flush(deadline); }
  bool Healthy(std::string* why) const override;
  const std::string& path() const { return path_; }

 private:
  void Fail(const Status& status);
  void SyncLoop();

  const std::string path_;
  PipelineObserver* const observer_;
  // Appended to by the dispatcher thread, fsynced by syncer_ (both are safe
  // on one descriptor at the same time); closed only once syncer_ has ended.
  std::unique_ptr<WritableFile> file_;
  mutable std::mutex mutex_;          // guards what follows
  std::condition_variable work_;      // a batch was appended, or stop_
  std::condition_variable synced_;    // synced_through_ grew, or a failure was reported
  std::uint64_t appended_ = 0;        // batches appended so far
  std::uint64_t synced_through_ = 0;  // of those, fsynced
  bool stop_ = false;
  Status failure_;                 // sticky: the first error
  bool failure_reported_ = false;  // logged and counted (Flush waits for that)
  std::thread syncer_;
};

class StdoutSink : public AlertSink {
 public:
  // Writes to `out` (default stdout) one readable line per alert (AlertLine,
  // in colour when `colour`), or with `json` the alert log's JSON line.
  explicit StdoutSink(std::FILE* out = stdout, bool json = false, bool colour = false)
      : out_(out), json_(json), colour_(colour) {}
  std::string_view name() const override { return "stdout"; }
  void Deliver(const std::vector<Alert>& alerts) override;

 private:
  std::FILE* out_;
  bool json_;
  bool colour_;
};

// How long the webhook waits before try n+1 (n >= 1): the base doubles per try
// up to `backoff_max`, and the wait is drawn uniformly from [base / 2, base]
// ("equal jitter": spreads retries of many daemons, never waits less than half).
// Common practice, no published source.
EventTime WebhookBackoff(const WebhookOptions& options, int failed_tries,
                         std::mt19937_64* random);

// One POST of `body` (application/json) to `url`: Ok for a 2xx answer,
// Unavailable otherwise (connection refused, timeout, other status), with the
// reason. Blocks up to about `timeout`.
Status PostJson(const HttpUrl& url, const std::string& body,
                std::chrono::milliseconds timeout);

class WebhookSink : public AlertSink {
 public:
  // `options.enabled()` must hold. Opens nothing until the first dead letter.
  WebhookSink(WebhookOptions options, std::string dead_letter_path,
              FileSystem* file_system, PipelineObserver* observer);
  ~WebhookSink() override;  // stops the sender thread (without draining)
  std::string_view name() const override { return "webhook"; }
  void Start();
  void Deliver(const std::vector<Alert>& alerts) override;
  void Drain(std::chrono::steady_clock::time_point deadline) override;
  bool Healthy(std::string* why) const override;

  std::size_t queued() const;
  std::uint64_t delivered() const { return delivered_.load(); }
  std::uint64_t dead_lettered() const { return dead_lettered_.load(); }

 private:
  struct Pending {
    std::string json;
    int tries = 0;
    std::string last_error;
  };
  void Run();
  void DeadLetter(const Pending& pending, std::string_view reason);

  const WebhookOptions options_;
  HttpUrl url_;
  const std::string dead_letter_path_;
  FileSystem* const file_system_;
  PipelineObserver* const observer_;

  mutable std::mutex
      mutex_;  // guards queue_, stop_, drain_deadline_, dead_file_, failure_
  std::condition_variable wake_;
  std::deque<Pending> queue_;
  bool stop_ = false;
  bool draining_ = false;
  std::chrono::steady_clock::time_point drain_deadline_{};
  std::unique_ptr<WritableFile> dead_file_;
  Status failure_;    // sticky: the first dead-letter write failure
  bool idle_ = true;  // the sender holds no alert
  std::condition_variable idle_changed_;

  std::atomic<std::uint64_t> delivered_{0};
  std::atomic<std::uint64_t> dead_lettered_{0};
  std::thread thread_;
};

class AlertDispatcher : public AlertPublisher {
 public:
  struct Options {
    std::size_t queue_batches =
        1024;                    // from all shards together; a full queue blocks them
    std::size_t recent = 10000;  // alerts and events kept for the API
    bool events = false;         // sinks also get resume, retrain and meter-reset events
  };
  // `observer` may be null. Sinks are added before Start.
  AlertDispatcher(Options options, PipelineObserver* observer);
  ~AlertDispatcher() override;
  // The sink gets only events of at least `min_severity` (detectors/severity.h).
  void AddSink(std::unique_ptr<AlertSink> sink,
               Severity min_severity = Severity::kRecord);
  void Start();

  void Publish(std::size_t shard, std::vector<Alert>* alerts) override;

  // Delivers everything queued, drains the sinks until `deadline`, and stops
  // the thread. Later Publish calls drop their alerts (and log that).
  void Stop(std::chrono::steady_clock::time_point deadline);

  // Waits until every batch published so far is delivered to the sinks and
  // each sink has flushed (AlertSink::Flush); false when `deadline` came
  // first. Any thread.
  bool Flush(std::chrono::steady_clock::time_point deadline);

  // Alerts and events with detected_at >= since, ordered by detected_at
  // (oldest first), at most `limit` (the newest ones when more match).
  std::vector<Alert> Recent(EventTime since, std::size_t limit) const;
  // Every sink healthy; else false with the first unhealthy sink's reason.
  bool Healthy(std::string* why) const;
  std::uint64_t delivered() const { return delivered_.load(); }

 private:
  void Run();

  const Options options_;
  PipelineObserver* const observer_;
  struct RoutedSink {
    std::unique_ptr<AlertSink> sink;
    Severity min_severity;
  };
  std::vector<RoutedSink> sinks_;

  std::mutex mutex_;  // guards queue_ and stopping_
  std::condition_variable not_empty_, not_full_, drained_;
  std::deque<std::vector<Alert>> queue_;
  bool stopping_ = false;
  bool busy_ = false;  // the thread holds a batch

  mutable std::mutex recent_mutex_;  // guards recent_
  std::deque<Alert> recent_;
  std::atomic<std::uint64_t> delivered_{0};
  std::thread thread_;
};

}  // namespace plumbline
