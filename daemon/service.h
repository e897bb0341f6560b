// Service: the running `serve` daemon minus its HTTP server. It owns the
// shards, the alert dispatcher and its sinks, the TCP listener (on its own I/O
// thread) and the file followers, and implements ServiceView for the HTTP API.
//
//   TCP sessions ─┐                       ┌ shard 0 (Engine) ─┐
//   file followers┼─ parse ─ ShardRouter ─┼ shard 1 (Engine) ─┼─ AlertDispatcher ─┬ alert
//   log HTTP ingest ──┘   (per producer)      └ shard N-1        ─┘   (bounded queue)  ├
//   stdout
//                      bounded queues, blocking when full                         └
//                      webhook ─ its own queue
//
// The Kafka and MQTT inputs (daemon/kafka_input.h, daemon/mqtt_input.h) route
// like the others; alerts may also go to Kafka (daemon/kafka_alert_sink.h).
//
// Staged shutdown (Shutdown): stop the inputs (the caller stops the HTTP server
// first), let the shards drain their queues and release held readings, let
// the dispatcher deliver what they raised, and drain the sinks (the webhook
// until the deadline, then its dead-letter file), all within
// `shutdown_timeout`. Reload (SIGHUP) swaps the profiles on every shard,
// keeping the state of series whose settings did not change. Annotations made
// through the API are kept in the state directory and applied like the
// config's (a reload keeps them).
//
// Thread-safety: the ServiceView methods may be called from any thread once
// Start has returned Ok, until Shutdown returns. Start, Reload and Shutdown
// are called by one controlling thread.
#pragma once

#include <utility>
#include <atomic>
#include <boost/asio/executor_work_guard.hpp>
#include <boost/asio/io_context.hpp>
#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <memory>
#include <mutex>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "config/config.h"
#include "daemon/alert_sinks.h"
#include "daemon/annotation_store.h"
#include "daemon/checkpoint.h"
#include "daemon/clock.h"
#include "daemon/file_follower.h"
#include "daemon/file_system.h"
#include "daemon/kafka_input.h"
#include "daemon/mqtt_input.h"
#include "daemon/pipeline_observer.h"
#include "daemon/service_view.h"
#include "daemon/shard.h"
#include "daemon/tcp_listener.h"
#include "daemon/tls.h"
#include "daemon/write_ahead_log.h"

namespace plumbline {

struct ServiceDependencies {
  const Clock* clock = SteadyClock::Get();
  FileSystem* file_system = FileSystem::Default();
  PipelineObserver* observer = nullptr;  // may stay null
  std::FILE* text_out = stdout;          // the stdout sink's stream
  bool text_json = false;                // the stdout sink writes JSON lines
  bool text_colour = false;              // ... or readable lines in colour
};

// What Reload did.
struct ReloadReport {
  ReconfigureReport series;          // summed over the shards
  std::vector<std::string> ignored;  // service settings that need a restart
};

class Service : public ServiceView {
 public:
  // Limits on what the API's questions may cost.
  static constexpr std::chrono::milliseconds kAskTimeout{2000};  // one shard round trip
  static constexpr std::chrono::seconds kIngestWait{
      60};  // an HTTP body's readings to be judged
  static constexpr std::size_t kMaxAlertsAnswered = 1000;

  Service(Config config, ServiceDependencies dependencies = {});
  ~Service() override;  // shuts down if still running

  // Calibrates every profile (refusing one that cannot be), creates the state
  // directory, opens the sinks, and starts the shards, the dispatcher, the TCP
  // listener and the followers. On failure nothing keeps running.
  Status Start();

  // Staged shutdown (see the header comment); returns when done or when the
  // deadline passed. Later calls do nothing.
  void Shutdown();

  // Replaces the profiles from `config` on every shard (SIGHUP). Refused
  // (InvalidArgument, nothing changed) when a profile cannot be calibrated.
  // Service settings that differ are reported in ignored: they need a restart.
  StatusOr<ReloadReport> Reload(const Config& config);

  // ---- ServiceView ----
  IngestReceipt IngestLines(std::string_view body) override;
  std::vector<SeriesSummary> ListSeries(std::string_view glob) override;
  std::optional<SeriesDetail> GetSeries(std::string_view name) override;
  std::vector<Alert> AlertsSince(EventTime since) override;
  bool Ready(std::string* why) override;
  StatusOr<SeriesForecast> ForecastSeries(std::string_view name,
                                          const std::vector<EventTime>& at,
                                          double level) override;
  std::vector<AnnotationEntry> ListAnnotations() override;
  StatusOr<Annotation> CreateAnnotation(std::string_view body) override;
  Status DeleteAnnotation(std::string_view id) override;

  // The TCP listener's bound address ("" when it is off).
  std::string tcp_address() const;
  int tcp_port() const;
  // The bearer token of the HTTP API and TCP ingest ("" when access control
  // is off), loaded by Start. Never log it.
  const std::string& access_token() const { return access_token_; }
  // The HTTP listener's TLS context (null: plain HTTP), made by Start from
  // listeners.http.tls; the TCP listener's is kept inside.
  const std::shared_ptr<TlsContext>& http_tls() const { return http_tls_; }
  // The config in force (controlling thread only: Reload replaces it).
  const Config& config() const { return config_; }
  std::size_t shard_count() const { return shards_ ? shards_->size() : 0; }
  // Alerts and events handed to the sinks so far.
  std::uint64_t delivered() const { return dispatcher_ ? dispatcher_->delivered() : 0; }

 private:
  void StopInputs(std::chrono::steady_clock::time_point deadline);

  Config config_;
  const ServiceDependencies deps_;
  // HTTP ingest's line limit (the TCP listener's), fixed at construction: the
  // API threads read it while Reload may replace config_.
  const std::size_t max_line_bytes_;
  const EventTime max_time_ahead_;  // likewise: the lead allowed over the wall clock
  std::string access_token_;        // set by Start, then read-only
  std::shared_ptr<TlsContext> tcp_tls_, http_tls_;  // likewise (null: no TLS)
  // The API's annotations file (kAnnotationFileName in the state directory).
  const std::string annotation_file_;
  // Calibrates each distinct profile once, for every shard and reload.
  std::shared_ptr<class DesignCache> designs_;

  std::unique_ptr<AlertDispatcher> dispatcher_;
  // Declared before the shards: batches hold leases on it until destroyed.
  std::unique_ptr<IngestBudget> budget_;
  std::unique_ptr<ShardSet> shards_;
  boost::asio::io_context io_;  // the TCP listener's
  std::optional<boost::asio::executor_work_guard<boost::asio::io_context::executor_type>>
      work_;
  std::thread io_thread_;
  std::unique_ptr<TcpListener> tcp_;
  std::vector<std::unique_ptr<FileFollower>> followers_;
  std::unique_ptr<KafkaInput> kafka_;  // inputs.kafka (null: off)
  std::unique_ptr<MqttInput> mqtt_;    // inputs.mqtt (null: off)

  // Annotations made through the API (kept in the state directory's
  // kAnnotationFileName) join the config file's: every shard runs the config
  // file's profiles with both sets (Engine::Reconfigure applies a change to
  // the live series). The mutex also serialises those pushes, so the shards
  // see the changes in order.
  Config WithApiAnnotations() const;  // holds annotations_mutex_
  Status PushAnnotations();           // holds annotations_mutex_
  mutable std::mutex annotations_mutex_;
  Config file_config_;                       // profiles and config annotations in force
  std::vector<Annotation> api_annotations_;  // in creation order
  std::size_t next_annotation_number_ = 1;   // for ids the API makes up

  std::atomic<bool> started_{false};
  std::atomic<bool> stopping_{false};
  bool stopped_ = false;

  // Checkpoints (daemon/checkpoint.h, daemon/service_checkpoint.cc); off
  // while storage.checkpoint_every is 0. StartCheckpoints restores the
  // newest good checkpoint into the shards (before any input runs) and starts
  // the thread that saves one every checkpoint_every; StopCheckpoints stops
  // it and, once the shard queues are drained, saves the last one.
  Status StartCheckpoints();
  void StopCheckpoints(std::chrono::steady_clock::time_point deadline);
  Status SaveCheckpoint();
  std::unique_ptr<CheckpointStore> checkpoints_;
  std::unique_ptr<WriteAheadLog> wal_;  // made before the shards, which log into it
  std::uint64_t older_wal_done_ = 0;    // wal_done of the older checkpoint on disk
  std::unique_ptr<AlertPublisher> known_alerts_;  // in front of the dispatcher
  std::thread checkpoint_thread_;
  std::mutex checkpoint_mutex_;  // guards checkpoint_stop_ and checkpoint_failure_
  std::condition_variable checkpoint_wake_;
  bool checkpoint_stop_ = false;
  Status checkpoint_failure_;  // the first failed save (sticky; shown on /readyz)
};

}  // namespace plumbline
