// CollectingPublisher: an AlertPublisher for tests that keeps every alert the
// shards publish, in arrival order. Thread-safe (one mutex).
#pragma once

#include <cstddef>
#include <mutex>
#include <utility>
#include <vector>

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

}  // namespace plumbline::testing
