// MqttInput: readings from an MQTT broker (libmosquitto). It subscribes to
// the configured topic filters at QoS 1 and routes each message's readings to
// the shards:
//
//   payload a bare number  the reading of the series the topic maps to
//                          (MqttInputOptions::series, e.g. coldstore/{2}/{3}),
//                          at the time the message is received
//   payload reading lines  DESIGN.md "Readings": each names its own series
//
// Connection: a lost or refused connection is tried again after `backoff`,
// doubling up to `backoff_max` (reset by a successful connect). With a
// client_id set, the session is kept by the broker (clean session off), so
// QoS 1 messages published while the daemon was away are delivered when it
// comes back; without one, each start is a new session. Delivery is at least
// once: a message the broker sends again may be judged twice (the series'
// lateness rules refuse the older copy when it comes after newer readings).
//
// Thread-safety: Start and Stop from one controlling thread; the counters
// from any. The client runs on the input's own thread.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <memory>
#include <mutex>
#include <string>
#include <thread>

#include "config/stream_options.h"
#include "daemon/pipeline_observer.h"
#include "daemon/shard.h"
#include "detectors/status.h"

// The C libraries' handles (their headers stay in the .cc files).
struct mosquitto;

namespace plumbline {

class MqttInput {
 public:
  static constexpr int kLoggedRejections = 5;  // bad messages logged, then counted

  // `shards` and `observer` (may be null) must outlive it. Readings later
  // than the wall clock plus `max_time_ahead` are refused.
  MqttInput(MqttInputOptions options, ShardSet* shards, EventTime max_time_ahead,
            PipelineObserver* observer);
  ~MqttInput();  // stops

  // Makes the client and starts the thread, which connects (and keeps
  // trying). InvalidArgument when libmosquitto refuses the settings.
  Status Start();
  // Disconnects and joins the thread; readings routed so far are handed on.
  void Stop();

  std::uint64_t readings() const { return readings_.load(); }
  std::uint64_t rejected() const { return rejected_.load(); }
  std::uint64_t connects() const { return connects_.load(); }

 private:
  friend struct MqttCallbacks;  // libmosquitto's callbacks (mqtt_input.cc)
  void Run();
  void OnConnect(int code);
  void OnMessage(std::string_view topic, std::string_view payload);
  void Refuse(std::string_view reason, std::string_view detail);

  const MqttInputOptions options_;
  ShardSet* const shards_;
  const EventTime max_time_ahead_;
  PipelineObserver* const observer_;
  std::string client_id_;

  ::mosquitto* client_ = nullptr;
  std::mutex mutex_;  // guards stop_
  std::condition_variable wake_;
  bool stop_ = false;
  std::thread thread_;

  // Input thread only:
  std::unique_ptr<ShardRouter> router_;
  std::unique_ptr<class ReadingParser> parser_;
  bool connected_ = false;
  std::uint64_t logged_rejections_ = 0;

  std::atomic<std::uint64_t> readings_{0};
  std::atomic<std::uint64_t> rejected_{0};
  std::atomic<std::uint64_t> connects_{0};
};

}  // namespace plumbline
