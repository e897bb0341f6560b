#include "daemon/mqtt_input.h"

#include <mosquitto.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <vector>

#include "daemon/clock.h"
#include "daemon/log.h"
#include "daemon/message_payload.h"
#include "daemon/reading_parser.h"

namespace plumbline {
namespace {

// How long one network loop waits for traffic (and so how soon Stop is seen).
constexpr int kLoopMilliseconds = 100;
constexpr int kQos = 1;  // at least once

// libmosquitto's global state, set up once for the process.
void InitLibrary() {
  static const int done = mosquitto_lib_init();
  (void)done;
}

}  // namespace

struct MqttCallbacks {
  static void Connect(mosquitto*, void* self, int code) {
    static_cast<MqttInput*>(self)->OnConnect(code);
  }
  static void Disconnect(mosquitto*, void* self, int code) {
    auto* input = static_cast<MqttInput*>(self);
    input->connected_ = false;
    if (code != 0) {
      LogWarning("mqtt connection lost",
                 {{"host", input->options_.host}, {"reason", mosquitto_strerror(code)}});
    }
  }
  static void Message(mosquitto*, void* self, const mosquitto_message* message) {
    static_cast<MqttInput*>(self)->OnMessage(
        message->topic, std::string_view(static_cast<const char*>(message->payload),
                                         static_cast<std::size_t>(message->payloadlen)));
  }
};

MqttInput::MqttInput(MqttInputOptions options, ShardSet* shards, EventTime max_time_ahead,
                     PipelineObserver* observer)
    : options_(std::move(options)),
      shards_(shards),
      max_time_ahead_(max_time_ahead),
      observer_(observer) {}

MqttInput::~MqttInput() { Stop(); }

Status MqttInput::Start() {
  InitLibrary();
  client_id_ = options_.client_id.empty() ? "plumbline-" + std::to_string(::getpid())
                                          : options_.client_id;
  // A named client keeps its session (and QoS 1 messages) across reconnects.
  client_ = mosquitto_new(client_id_.c_str(), options_.client_id.empty(), this);
  if (!client_) return Status::InvalidArgument("mqtt: cannot make a client");
  mosquitto_connect_callback_set(client_, &MqttCallbacks::Connect);
  mosquitto_disconnect_callback_set(client_, &MqttCallbacks::Disconnect);
  mosquitto_message_callback_set(client_, &MqttCallbacks::Message);
  router_ = std::make_unique<ShardRouter>(shards_, nullptr, nullptr, "mqtt");
  parser_ = std::make_unique<ReadingParser>(
      ReadingParserOptions{},
      [this](const Reading& reading) {
        router_->Add(reading, 0);
        readings_.fetch_add(1);
      },
      [this](std::uint64_t, ReadingError reason, std::string_view detail) {
        if (observer_) observer_->OnParseRejected(reason, 1);
        Refuse(ToString(reason), detail);
      });
  thread_ = std::thread([this] { Run(); });
  return Status::Ok();
}

void MqttInput::Stop() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  wake_.notify_all();
  if (thread_.joinable()) thread_.join();
  if (client_) {
    mosquitto_destroy(client_);
    client_ = nullptr;
  }
}

void MqttInput::Run() {
  const int keepalive = static_cast<int>(options_.keepalive / kMicrosPerSecond);
  auto backoff = std::chrono::microseconds(options_.backoff);
  bool first = true;
  while (true) {
    {
      std::unique_lock<std::mutex> lock(mutex_);
      if (stop_) break;
      if (!first) {
        // Wait before trying again; Stop cuts the wait short.
        if (wake_.wait_for(lock, backoff, [this] { return stop_; })) break;
        backoff = std::min(backoff * 2, std::chrono::microseconds(options_.backoff_max));
      }
    }
    const int code = first ? mosquitto_connect(client_, options_.host.c_str(),
                                               options_.port, keepalive)
                           : mosquitto_reconnect(client_);
    first = false;
    if (code != MOSQ_ERR_SUCCESS) {
      LogWarning("mqtt connect failed",
                 {{"host", options_.host},
                  {"port", options_.port},
                  {"reason", code == MOSQ_ERR_ERRNO ? std::strerror(errno)
                                                    : mosquitto_strerror(code)},
                  {"retry_in_seconds", std::chrono::duration<double>(backoff).count()}});
      continue;
    }
    // Until the connection breaks or Stop.
    while (true) {
      {
        std::lock_guard<std::mutex> lock(mutex_);
        if (stop_) break;
      }
      const int loop = mosquitto_loop(client_, kLoopMilliseconds, 1);
      router_->Flush();
      if (loop != MOSQ_ERR_SUCCESS) break;
      if (connected_) backoff = std::chrono::microseconds(options_.backoff);
    }
  }
  if (connected_) {
    mosquitto_disconnect(client_);
    mosquitto_loop(client_, kLoopMilliseconds, 1);
  }
  router_.reset();  // hands on what is routed
  LogInfo("mqtt input stopped",
          {{"readings", readings_.load()}, {"refused", rejected_.load()}});
}

void MqttInput::OnConnect(int code) {
  if (code != 0) {
    LogWarning("mqtt connection refused",
               {{"host", options_.host}, {"reason", mosquitto_connack_string(code)}});
    return;
  }
  connected_ = true;
  connects_.fetch_add(1);
  std::vector<char*> filters;
  for (const std::string& filter : options_.topics) {
    filters.push_back(const_cast<char*>(filter.c_str()));
  }
  const int subscribed =
      mosquitto_subscribe_multiple(client_, nullptr, static_cast<int>(filters.size()),
                                   filters.data(), kQos, 0, nullptr);
  if (subscribed != MOSQ_ERR_SUCCESS) {
    LogError("mqtt subscribe failed", {{"reason", mosquitto_strerror(subscribed)}});
    return;
  }
  LogInfo("mqtt connected", {{"host", options_.host},
                             {"port", options_.port},
                             {"client_id", client_id_},
                             {"topic_filters", options_.topics.size()}});
}

void MqttInput::OnMessage(std::string_view topic, std::string_view payload) {
  const EventTime now = WallClockNow();
  if (double value = 0.0; BareNumber(payload, &value)) {
    const std::string series = SeriesFromTopic(options_.series, topic);
    ReadingError reason = ReadingError::kBadSeriesName;
    if (series.empty() || !IsValidSeriesName(series, &reason)) {
      Refuse(ToString(reason), topic);
      return;
    }
    router_->Add(Reading{now, series, value}, 0);
    readings_.fetch_add(1);
    return;
  }
  parser_->set_latest_time(now + max_time_ahead_);
  parser_->Feed(payload);
  parser_->Finish();
}

void MqttInput::Refuse(std::string_view reason, std::string_view detail) {
  rejected_.fetch_add(1);
  if (logged_rejections_++ < kLoggedRejections) {
    LogWarning("mqtt message refused", {{"reason", reason}, {"detail", detail}});
  }
}

}  // namespace plumbline
