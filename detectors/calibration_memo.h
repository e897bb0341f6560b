// CalibrationMemo: remembers calibrations that depend on one number (the
// in-control ARL) alone, so profiles that share an arl0 share one calibration.
//
// The variance and arrival CUSUMs of a profile are fixed by arl0: the same
// Markov-chain searches (run_length_chain.h) for every profile that asks,
// tenths of a second at -O2 and seconds under the sanitizers. A daemon whose
// config has many profiles, or a reload, would otherwise repeat them on the
// shard thread while readings wait. Thread-safe; a calibration runs outside
// the lock (two threads may both compute a missing entry; they get the same
// value).
#pragma once

#include <cmath>
#include <cstddef>
#include <map>
#include <mutex>
#include <utility>

#include "detectors/status.h"

namespace plumbline {

template <typename Value>
class CalibrationMemo {
 public:
  // The value for `key`, from `compute` (a callable returning StatusOr<Value>)
  // the first time. Failures are not remembered, nor are keys that are not
  // finite (a NaN would compare equivalent to every key in the map).
  template <typename Compute>
  StatusOr<Value> Get(double key, Compute&& compute) {
    if (!std::isfinite(key)) return std::forward<Compute>(compute)();
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (auto it = values_.find(key); it != values_.end()) return it->second;
    }
    StatusOr<Value> value = std::forward<Compute>(compute)();
    if (!value.ok()) return value;
    std::lock_guard<std::mutex> lock(mutex_);
    if (values_.size() >= kMaxEntries) values_.clear();  // configs hold a few arl0s
    values_.emplace(key, *value);
    return value;
  }

 private:
  static constexpr std::size_t kMaxEntries = 64;
  std::mutex mutex_;
  std::map<double, Value> values_;
};

}  // namespace plumbline
