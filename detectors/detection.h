// What a change detector says when it fires. Shared by every detector so the
// per-series pipeline can treat them alike. Plain value types; thread-compatible.
#pragma once

#include <cstdint>
#include <optional>
#include <string_view>

#include "detectors/event_time.h"

namespace plumbline {

// Which way the monitored quantity moved.
enum class Direction { kUp, kDown, kNone };

std::string_view ToString(Direction direction);
std::optional<Direction> DirectionFromString(std::string_view text);

// The result of one detector update.
struct Alarm {
  bool fired = false;               // true only on the update that crossed the threshold
  Direction direction = Direction::kNone;
  EventTime change_at = 0;          // estimated first time of the new regime
  double shift = 0.0;               // estimated shift of the mean, in input units (signed)
  double statistic = 0.0;           // the decision statistic at this update
  // On a firing: the detector's readings from change_at through this one.
  std::int64_t length = 0;
  // On a firing of a detector on standardised input (CUSUM, Page-Hinkley):
  // the mean of those readings, measured from zero (signed). A CUSUM's shift
  // is this; Page-Hinkley's is measured from its running mean before
  // change_at instead. Not kept in checkpoints (read only as the alarm fires).
  double input_mean = 0.0;
};

}  // namespace plumbline
