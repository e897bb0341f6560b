// Helpers for tests that run readings through a ShardSet and compare the
// alerts with a replay's: a publisher that collects every alert, readings that
// own their series names, alert keys for comparing runs, one replay and one
// run through the shards.
// CollectingPublisher is thread-safe (one mutex); the rest are plain functions.
#pragma once

#include <cstddef>
#include <cstdint>
#include <mutex>
#include <set>
#include <string>
#include <tuple>
#include <utility>
#include <vector>

#include <gtest/gtest.h>

#include "config/config.h"
#include "daemon/clock.h"
#include "daemon/engine.h"
#include "daemon/shard.h"

namespace plumbline::testing {

class CollectingPublisher : public AlertPublisher {
 public:
  void Publish(std::size_t, std::vector<Alert>* alerts) override {
    std::lock_guard<std::mutex> lock(mutex_);
    for (Alert& a : *alerts) alerts_.push_back(std::move(a));
    alerts->clear();
  }
  std::vector<Alert> alerts() const {
    std::lock_guard<std::mutex> lock(mutex_);
    return alerts_;
  }

 private:
  mutable std::mutex mutex_;  // guards alerts_
  std::vector<Alert> alerts_;
};

struct OwnedReading {
  EventTime time;
  std::string series;
  double value;
};

// id, event, change, detect: what two runs must agree on.
using AlertKey = std::tuple<std::string, std::string, EventTime, EventTime>;

inline std::multiset<AlertKey> Keys(const std::vector<Alert>& alerts) {
  std::multiset<AlertKey> keys;
  for (const Alert& a : alerts) {
    keys.emplace(a.id, std::string(ToString(a.event)), a.change_at, a.detected_at);
  }
  return keys;
}

// What `replay` does (daemon/replay_command.cc) for one time-ordered input.
inline std::vector<Alert> Replay(const Config& config,
                                 const std::vector<OwnedReading>& readings) {
  Engine engine(config);
  std::vector<Alert> out;
  for (const OwnedReading& r : readings) {
    engine.AdvanceClock(r.time, &out);
    engine.Ingest(r.series, r.time, r.value, &out);
  }
  engine.Finish(&out);
  return out;
}

// Routes the readings in order through `shards` shards and returns every alert.
inline std::vector<Alert> RunShards(const Config& config,
                                    const std::vector<OwnedReading>& readings,
                                    std::size_t shards, const Clock* clock) {
  CollectingPublisher publisher;
  ShardSet set(shards, config, ShardOptions{}, clock, &publisher, nullptr);
  set.Start();
  {
    ShardRouter router(&set);
    std::uint64_t line = 0;
    for (const OwnedReading& r : readings) {
      EXPECT_TRUE(router.Add({r.time, r.series, r.value}, ++line));
    }
  }
  set.CloseAndJoin();
  return publisher.alerts();
}

}  // namespace plumbline::testing
