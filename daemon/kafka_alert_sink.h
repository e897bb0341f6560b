// KafkaAlertSink: each alert (AlertToJson, with its stable id) as one message
// on a Kafka topic, keyed by series name, so one series' alerts stay in order
// on one partition. The producer is idempotent (enable.idempotence: retries
// never write a message twice nor reorder). When a partition moves after an
// instance died, alerts raised again by the new owner carry the same ids
// (daemon/kafka_input.h); consumers drop repeats by id.
//
// A delivery that fails for good (after librdkafka's retries) is sticky: the
// sink is unhealthy (on /readyz) and says why.
//
// Thread-safety: Deliver on the dispatcher thread; Flush, Drain and Healthy
// from any thread (librdkafka's producer is thread-safe).
#pragma once

#include <atomic>
#include <mutex>
#include <string>

#include "config/stream_options.h"
#include "daemon/alert_sinks.h"

// The C libraries' handles (their headers stay in the .cc files).
struct rd_kafka_s;

namespace plumbline {

class KafkaAlertSink : public AlertSink {
 public:
  // Makes the producer; InvalidArgument when librdkafka refuses a setting.
  static StatusOr<std::unique_ptr<KafkaAlertSink>> Make(const KafkaSinkOptions& options,
                                                        PipelineObserver* observer);
  ~KafkaAlertSink() override;  // waits a little for what is in flight, then drops it

  std::string_view name() const override { return "kafka"; }
  void Deliver(const std::vector<Alert>& alerts) override;
  bool Flush(std::chrono::steady_clock::time_point deadline) override;
  void Drain(std::chrono::steady_clock::time_point deadline) override;
  bool Healthy(std::string* why) const override;

  std::uint64_t delivered() const { return delivered_.load(); }

 private:
  KafkaAlertSink(std::string topic, ::rd_kafka_s* producer, PipelineObserver* observer);
  friend struct KafkaSinkCallbacks;  // delivery reports (kafka_alert_sink.cc)
  void Fail(const std::string& why);

  const std::string topic_;
  ::rd_kafka_s* producer_;
  PipelineObserver* const observer_;
  mutable std::mutex mutex_;  // guards failure_
  std::string failure_;       // sticky: the first failed delivery
  std::atomic<std::uint64_t> delivered_{0};
};

}  // namespace plumbline
