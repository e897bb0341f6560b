// Settings of the message-broker inputs and sink (`plumbline serve`): a Kafka
// consumer group that shares the partitions of a readings topic among
// instances, an MQTT subscriber, and a Kafka topic for alerts. Plain value
// types with their defaults in the structs; config/config.h maps the YAML onto
// them. Thread-compatible: built once, then shared read-only.
//
//   inputs:
//     kafka:
//       brokers: 127.0.0.1:9092          # bootstrap servers (off while empty)
//       topic: coldstore-readings        # message key: the series name
//       group: plumbline                 # consumer group of every instance
//       state_topic: plumbline-partition-state  # compacted topic for partition
//                                        # state; or
//       state_directory: /mnt/shared/plumbline  # a directory all instances share
//       checkpoint_every: 10s            # partition state saved this often
//       start_at: beginning              # partitions with no saved state
//       session_timeout: 10s             # a silent instance leaves the group
//     mqtt:
//       host: 127.0.0.1                  # broker (off while empty)
//       port: 1883
//       client_id: plumbline-1           # default: plumbline-<pid>
//       topics: ["harbourside/+/+"]      # topic filters, subscribed at QoS 1
//       series: "coldstore/{2}/{3}"      # {topic}, or {1}..{9}: a topic level
//       keepalive: 30s
//       backoff: 1s                      # first reconnect wait; doubles ...
//       backoff_max: 1m                  # ... up to this
//   sinks:
//     kafka: {brokers: 127.0.0.1:9092, topic: plumbline-alerts,
//             min_severity: record}      # idempotent producer, key: series
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "detectors/event_time.h"
#include "detectors/severity.h"

namespace plumbline {

// Readings from a Kafka topic in a consumer group (daemon/kafka_input.h).
struct KafkaInputOptions {
  std::string brokers;  // empty: off
  std::string topic;
  std::string group = "plumbline";
  std::string state_topic;      // where partition state lives: a compacted topic,
  std::string state_directory;  // or a directory every instance reads and writes
  EventTime checkpoint_every = 10 * kMicrosPerSecond;
  bool start_at_end = false;  // key start_at: beginning | end
  EventTime session_timeout = 10 * kMicrosPerSecond;

  bool enabled() const { return !brokers.empty(); }
  // Rules (when enabled): topic non-empty; group non-empty; state_topic or
  // state_directory, not both; checkpoint_every in [100ms, 1h];
  // session_timeout in [1s, 5m].
  bool IsValid(std::string* why) const;
};

// Readings from an MQTT broker (daemon/mqtt_input.h).
struct MqttInputOptions {
  std::string host;  // empty: off
  int port = 1883;
  std::string client_id;            // empty: plumbline-<process id>
  std::vector<std::string> topics;  // topic filters (+ and # wildcards)
  // The series name of a bare-number payload: text with {topic} (the whole
  // topic) and {1}..{9} (its levels, 1-based) replaced.
  std::string series = "{topic}";
  EventTime keepalive = 30 * kMicrosPerSecond;
  EventTime backoff = kMicrosPerSecond;
  EventTime backoff_max = kMicrosPerMinute;

  bool enabled() const { return !host.empty(); }
  // Rules (when enabled): port in [1, 65535]; topics non-empty, none empty;
  // series non-empty with only {topic} and {1}..{9} in braces; keepalive in
  // [5s, 1h]; backoff positive, backoff_max at least backoff.
  bool IsValid(std::string* why) const;
};

// Alerts to a Kafka topic (daemon/kafka_alert_sink.h).
struct KafkaSinkOptions {
  std::string brokers;  // empty: off
  std::string topic = "plumbline-alerts";
  Severity min_severity = Severity::kRecord;

  bool enabled() const { return !brokers.empty(); }
  // Rules (when enabled): topic non-empty.
  bool IsValid(std::string* why) const;
};

// The series name `series_template` gives `topic` ("" when a level it names
// is missing). Precondition: the template passed MqttInputOptions::IsValid.
std::string SeriesFromTopic(std::string_view series_template, std::string_view topic);

}  // namespace plumbline
