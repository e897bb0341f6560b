// Event time: the timestamp a reading carries, as whole microseconds since the
// Unix epoch (UTC). Signed, so readings before 1970 (historic data sets) work;
// the range is about +/- 292,000 years. Detectors never read a clock: every
// time they report is a time they were given.
#pragma once

#include <cstdint>

namespace plumbline {

using EventTime = std::int64_t;  // microseconds since 1970-01-01T00:00:00Z

inline constexpr EventTime kMicrosPerSecond = 1'000'000;
inline constexpr EventTime kMicrosPerMinute = 60 * kMicrosPerSecond;
inline constexpr EventTime kMicrosPerHour = 60 * kMicrosPerMinute;
inline constexpr EventTime kMicrosPerDay = 24 * kMicrosPerHour;

inline constexpr double ToSeconds(EventTime t) {
  return static_cast<double>(t) / static_cast<double>(kMicrosPerSecond);
}

}  // namespace plumbline
