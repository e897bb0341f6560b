// The daemon's own settings (`plumbline serve`): listeners, shards, the state
// directory, inputs and alert sinks. Plain value types with their defaults in
// the structs, so that a config holding only `series:` (DESIGN.md's minimal
// form) gives a working daemon on loopback. config/config.h maps the YAML onto
// these structs; each IsValid states its one-line rules, and the first word of
// every rule names the key it is about (the loader places the error there).
// Thread-compatible: built once, then shared read-only.
//
//   listeners:
//     tcp:  {address: 127.0.0.1, port: 7411, idle_timeout: 5m,
//            max_connections: 1024, max_line_bytes: 4096, enabled: true}
//     http: {address: 127.0.0.1, port: 7412, max_body_bytes: 16777216, enabled: true}
//     (each may add tls: {certificate_file: server.pem, key_file: server.key})
//   shards: 0                      # 0 = one per core
//   queue_batches: 64              # per shard; a full queue slows the inputs
//   max_series: 1000000            # new series beyond this are refused
//   recent_points: 240             # per series, for the status page (0: none)
//   storage:
//     directory: plumbline-state   # offsets and default sink files live here
//     checkpoint_every: 5m         # series state saved this often and at shutdown (0: never,
//                                  # and no write-ahead log either)
//     http_ingest: durable         # durable: POST /v1/readings answers once its readings
//                                  # are in the fsynced write-ahead log; fast: at once
//   inputs:
//     files:                       # followed like `tail -F`
//       - path: /var/log/coldstore/readings.csv
//         start_at: beginning      # beginning | end (first run only)
//     kafka: {...}                 # a consumer group (config/stream_options.h)
//     mqtt: {...}                  # an MQTT subscriber (config/stream_options.h)
//   sinks:
//     alert_log: {path: alerts.jsonl, enabled: true}   # default <directory>/alerts.jsonl
//     webhook: {url: http://127.0.0.1:9000/alerts, attempts: 8, backoff: 500ms,
//               backoff_max: 30s, timeout: 5s, queue: 1000,
//               dead_letter: webhook-dead-letter.jsonl, min_severity: page}
//     stdout: true                 # one readable line per alert; or
//                                  # {enabled: true, min_severity: notify}
//     (each sink's min_severity: record | notify | page, default record = all;
//      see detectors/severity.h)
//     events: false                # also send resume, retrain and meter-reset events
//   metrics:
//     series_limit: 100            # per-series detector gauges for at most this many
//   shutdown_timeout: 10s
//   max_time_ahead: 1d             # readings later than the clock plus this are refused
//   ingest_memory_bytes: 67108864  # readings in flight to the shards; beyond, inputs wait
//   access:                        # bearer token for HTTP and TCP ingest (off if unset)
//     token_file: /etc/plumbline/token   # or token_env: PLUMBLINE_TOKEN
//
// Relative paths are relative to the daemon's working directory, except the
// sink files (`alert_log.path`, `webhook.dead_letter`), which are relative to
// the state directory.
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "config/stream_options.h"
#include "detectors/event_time.h"
#include "detectors/severity.h"

namespace plumbline {

// A listener's TLS (daemon/tls.h): off while both files are unset. A
// listener with TLS takes TLS connections only (1.2 or later).
struct TlsOptions {
  std::string certificate_file;  // PEM certificate chain
  std::string key_file;          // PEM private key

  bool enabled() const { return !certificate_file.empty() || !key_file.empty(); }
  // Rules: certificate_file and key_file both set or both unset.
  bool IsValid(std::string* why) const;
};

// The line listener: one reading per line (DESIGN.md "Readings").
struct TcpListenerOptions {
  bool enabled = true;
  std::string address = "127.0.0.1";              // loopback unless told otherwise
  int port = 7411;                                // 0: any free port (logged at start)
  EventTime idle_timeout = 5 * kMicrosPerMinute;  // a silent connection is closed
  int max_connections = 1024;                     // more are accepted and closed at once
  std::size_t max_line_bytes = 4096;  // a longer line is refused, not the connection
  TlsOptions tls;

  // Rules: address non-empty; port in [0, 65535]; idle_timeout positive;
  // max_connections in [1, 100000]; max_line_bytes in [64, 16777216]; tls valid.
  bool IsValid(std::string* why) const;
};

// The HTTP API (`POST /v1/readings`, `GET /v1/...`, `/metrics`).
struct HttpListenerOptions {
  bool enabled = true;
  std::string address = "127.0.0.1";
  int port = 7412;                         // 0: any free port
  std::size_t max_body_bytes = 16u << 20;  // a larger request body is refused
  TlsOptions tls;

  // Rules: address non-empty; port in [0, 65535]; max_body_bytes in
  // [1024, 1073741824]; tls valid.
  bool IsValid(std::string* why) const;
};

// When HTTP ingest answers: after the write-ahead log's fsync, or at once.
enum class IngestAck { kDurable, kFast };
std::string_view ToString(IngestAck ack);
std::optional<IngestAck> IngestAckFromString(std::string_view text);
std::string_view IngestAckChoices();  // "durable | fast"

enum class StartAt { kBeginning, kEnd };
std::string_view ToString(StartAt start_at);
std::optional<StartAt> StartAtFromString(std::string_view text);
std::string_view StartAtChoices();  // "beginning | end"

// A file followed as it grows, through rotation and truncation.
struct FileInputOptions {
  std::string path;
  // Where to begin when the state directory knows no offset for this file.
  StartAt start_at = StartAt::kBeginning;
  EventTime poll_interval = 200 * 1000;  // 200 ms between looks at the file

  // Rules: path non-empty; poll_interval in [1ms, 1m].
  bool IsValid(std::string* why) const;
};

// JSON lines, appended and fsynced; a failure is sticky and makes the daemon
// not ready.
struct AlertLogOptions {
  bool enabled = true;
  std::string path = "alerts.jsonl";     // relative: inside the state directory
  Severity min_severity = Severity::kRecord;  // less urgent alerts are not written
  bool IsValid(std::string* why) const;  // path non-empty when enabled
};

// HTTP POST of each alert as one JSON object. Off while `url` is empty.
struct WebhookOptions {
  std::string url;                 // http://host[:port][/path]; https is not supported
  int attempts = 8;                // tries per alert before the dead-letter file
  EventTime backoff = 500 * 1000;  // wait before the 2nd try; doubles each try
  EventTime backoff_max = 30 * kMicrosPerSecond;  // cap on one wait (before jitter)
  EventTime timeout = 5 * kMicrosPerSecond;       // per try: connect, send, answer
  int queue = 1000;  // alerts waiting; beyond, straight to dead letter
  std::string dead_letter = "webhook-dead-letter.jsonl";  // relative: state directory
  Severity min_severity = Severity::kRecord;  // less urgent alerts are not sent

  bool enabled() const { return !url.empty(); }
  // Rules: url empty or http://host[:port][/path]; attempts in [1, 100];
  // backoff and backoff_max positive with backoff <= backoff_max; timeout in
  // (0, 10m]; queue in [1, 1000000]; dead_letter non-empty.
  bool IsValid(std::string* why) const;
};

// The parts of an http:// URL the webhook needs. False for anything else.
struct HttpUrl {
  std::string host;
  std::string port = "80";
  std::string target = "/";
};
bool ParseHttpUrl(std::string_view url, HttpUrl* out, std::string* why = nullptr);

struct SinkOptions {
  AlertLogOptions alert_log;
  WebhookOptions webhook;
  bool to_stdout = true;  // key `stdout` (or stdout.enabled)
  Severity stdout_min_severity = Severity::kRecord;  // key stdout.min_severity
  bool events = false;    // also send resume, retrain and meter-reset events
  KafkaSinkOptions kafka;  // key sinks.kafka
  bool IsValid(std::string* why) const;
};

// Who may talk to the daemon: with a token set, every HTTP request but
// /healthz needs `Authorization: Bearer <token>` (else 401), and every TCP
// connection must send `token <token>` as its first line (else it is closed).
struct AccessOptions {
  std::string token_file;  // a file whose first line is the token
  std::string token_env;   // or the environment variable holding it

  bool enabled() const { return !token_file.empty() || !token_env.empty(); }
  // Rules: not both token_file and token_env.
  bool IsValid(std::string* why) const;
};

struct ServiceOptions {
  TcpListenerOptions tcp;
  HttpListenerOptions http;
  int shards = 0;          // 0: std::thread::hardware_concurrency()
  int queue_batches = 64;  // per shard; each batch holds at most 1024 readings
  std::size_t max_series = 1'000'000;
  // Readings (with their forecasts) kept per series for the status page and
  // GET /v1/series/{name}: 24 bytes each; 0 keeps none.
  std::size_t recent_points = 240;
  std::string state_directory = "plumbline-state";
  // Series state is checkpointed this often and at shutdown, and restored
  // at start (daemon/checkpoint.h); 0: never (every restart relearns).
  EventTime checkpoint_every = 5 * kMicrosPerMinute;
  IngestAck http_ingest = IngestAck::kDurable;  // key storage.http_ingest
  std::vector<FileInputOptions> files;
  KafkaInputOptions kafka;  // key inputs.kafka
  MqttInputOptions mqtt;    // key inputs.mqtt
  SinkOptions sinks;
  int metrics_series_limit = 100;  // key metrics.series_limit
  EventTime shutdown_timeout = 10 * kMicrosPerSecond;
  // TCP and HTTP readings stamped more than this after the wall clock are
  // refused (time_in_future): one would make every later reading of its
  // series look late.
  EventTime max_time_ahead = kMicrosPerDay;
  // Bytes of readings in flight between the inputs and the shards (queued
  // batches, HTTP bodies being ingested). At the bound, TCP and file reads
  // pause and HTTP ingest answers 503 with Retry-After.
  std::size_t ingest_memory_bytes = 64u << 20;
  AccessOptions access;

  // Rules: each part valid; shards in [0, 256]; queue_batches in [1, 65536];
  // max_series >= 1; recent_points in [0, 4096]; state_directory non-empty;
  // metrics_series_limit in [0, 100000]; shutdown_timeout in (0, 10m]; no file
  // path given twice; with inputs.kafka, checkpoint_every 0 (the input keeps
  // each partition's state where every instance finds it).
  bool IsValid(std::string* why) const;
  // The shard count to run: `shards`, or the number of cores when 0.
  int EffectiveShards() const;
  // A sink file's path: as given when absolute, else inside the state directory.
  std::string InStateDirectory(const std::string& path) const;
};

// Lines that `plumbline check` prints about the service settings, e.g.
// "listeners: tcp 127.0.0.1:7411, http 127.0.0.1:7412".
std::vector<std::string> DescribeService(const ServiceOptions& options);

}  // namespace plumbline
