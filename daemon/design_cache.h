// DesignCache: profile designs made once and shared by the engines of several
// threads (serve's shards, replay's), since a design is read-only once made
// and calibrating one takes a good part of a second. Thread-safe: the mutex is
// held while calibrating, so engines asking for the same profile wait for the
// one calibration.
#pragma once

#include <mutex>
#include <utility>
#include <vector>

#include "config/config.h"
#include "daemon/engine.h"  // SameProfileSettings
#include "detectors/series_monitor.h"
#include "detectors/status.h"

namespace plumbline {

class DesignCache {
 public:
  // The design of `profile`, made on first asking; a failed design is not kept.
  StatusOr<ProfileDesign> Make(const ProfileOptions& profile) {
    std::lock_guard<std::mutex> lock(mutex_);
    for (const auto& [options, design] : made_) {
      if (SameProfileSettings(options, profile)) return design;
    }
    auto design = ProfileDesign::Make(profile);
    if (design.ok()) made_.emplace_back(profile, *design);
    return design;
  }

 private:
  std::mutex mutex_;  // guards made_
  std::vector<std::pair<ProfileOptions, ProfileDesign>> made_;
};

}  // namespace plumbline
