#include "daemon/kafka_alert_sink.h"

#include <librdkafka/rdkafka.h>

#include "daemon/log.h"

namespace plumbline {
namespace {

// Wait on a full producer queue before trying again (backpressure on the
// dispatcher, and so on the shards).
constexpr int kQueueFullWaitMilliseconds = 100;
// What the destructor waits for messages in flight.
constexpr int kCloseWaitMilliseconds = 5000;

int MillisecondsUntil(std::chrono::steady_clock::time_point deadline) {
  const auto left = std::chrono::duration_cast<std::chrono::milliseconds>(
      deadline - std::chrono::steady_clock::now());
  return static_cast<int>(std::max<long long>(left.count(), 0));
}

}  // namespace

struct KafkaSinkCallbacks {
  static void OnDelivery(rd_kafka_t*, const rd_kafka_message_t* message, void* opaque) {
    auto* sink = static_cast<KafkaAlertSink*>(opaque);
    if (message->err) {
      sink->Fail(rd_kafka_err2str(message->err));
    } else {
      sink->delivered_.fetch_add(1);
    }
  }
};

StatusOr<std::unique_ptr<KafkaAlertSink>> KafkaAlertSink::Make(
    const KafkaSinkOptions& options, PipelineObserver* observer) {
  rd_kafka_conf_t* conf = rd_kafka_conf_new();
  char error[512];
  const std::pair<const char*, const char*> settings[] = {
      {"bootstrap.servers", options.brokers.c_str()},
      {"client.id", "plumbline-alerts"},
      {"enable.idempotence", "true"},
      {"linger.ms", "5"}};
  for (const auto& [name, value] : settings) {
    if (rd_kafka_conf_set(conf, name, value, error, sizeof error) != RD_KAFKA_CONF_OK) {
      rd_kafka_conf_destroy(conf);
      return Status::InvalidArgument(std::string("sinks.kafka: ") + name + ": " + error);
    }
  }
  rd_kafka_conf_set_dr_msg_cb(conf, &KafkaSinkCallbacks::OnDelivery);
  // The sink's address is the callbacks' opaque: made before the producer.
  std::unique_ptr<KafkaAlertSink> sink(
      new KafkaAlertSink(options.topic, nullptr, observer));
  rd_kafka_conf_set_opaque(conf, sink.get());
  sink->producer_ = rd_kafka_new(RD_KAFKA_PRODUCER, conf, error, sizeof error);
  if (!sink->producer_) {
    rd_kafka_conf_destroy(conf);
    return Status::InvalidArgument(std::string("sinks.kafka: ") + error);
  }
  return sink;
}

KafkaAlertSink::KafkaAlertSink(std::string topic, rd_kafka_t* producer,
                               PipelineObserver* observer)
    : topic_(std::move(topic)), producer_(producer), observer_(observer) {}

KafkaAlertSink::~KafkaAlertSink() {
  if (!producer_) return;
  rd_kafka_flush(producer_, kCloseWaitMilliseconds);
  if (const int left = rd_kafka_outq_len(producer_); left > 0) {
    LogError("kafka sink closed with alerts undelivered", {{"count", left}});
  }
  rd_kafka_destroy(producer_);
}

void KafkaAlertSink::Fail(const std::string& why) {
  std::lock_guard<std::mutex> lock(mutex_);
  if (!failure_.empty()) return;
  failure_ = why;
  LogError("kafka sink failed", {{"topic", topic_}, {"error", why}});
  if (observer_) observer_->OnSinkFailure(name());
}

void KafkaAlertSink::Deliver(const std::vector<Alert>& alerts) {
  for (const Alert& alert : alerts) {
    const std::string json = AlertToJson(alert);
    rd_kafka_resp_err_t error = RD_KAFKA_RESP_ERR_NO_ERROR;
    while ((error = rd_kafka_producev(
                producer_, RD_KAFKA_V_TOPIC(topic_.c_str()),
                RD_KAFKA_V_KEY(alert.series.data(), alert.series.size()),
                RD_KAFKA_V_VALUE(const_cast<char*>(json.data()), json.size()),
                RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_END)) ==
           RD_KAFKA_RESP_ERR__QUEUE_FULL) {
      rd_kafka_poll(producer_, kQueueFullWaitMilliseconds);
    }
    if (error) Fail(rd_kafka_err2str(error));
  }
  rd_kafka_poll(producer_, 0);  // delivery reports so far
}

bool KafkaAlertSink::Flush(std::chrono::steady_clock::time_point deadline) {
  rd_kafka_flush(producer_, MillisecondsUntil(deadline));
  return rd_kafka_outq_len(producer_) == 0 && Healthy(nullptr);
}

void KafkaAlertSink::Drain(std::chrono::steady_clock::time_point deadline) {
  if (!Flush(deadline)) {
    LogError("kafka sink: alerts still undelivered at the shutdown deadline",
             {{"count", static_cast<int>(rd_kafka_outq_len(producer_))}});
  }
}

bool KafkaAlertSink::Healthy(std::string* why) const {
  std::lock_guard<std::mutex> lock(mutex_);
  if (failure_.empty()) return true;
  if (why) *why = "kafka sink: " + failure_;
  return false;
}

}  // namespace plumbline
