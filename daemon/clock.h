// The daemon's clock seam. Shards read elapsed time through it to carry their
// event-time clock forward while no reading arrives (silence in live mode);
// tests drive a ManualClock instead of waiting. Detectors never read a clock.
// Thread-safe: Now may be called from any thread.
#pragma once

#include <atomic>
#include <chrono>

#include "detectors/event_time.h"

namespace plumbline {

class Clock {
 public:
  virtual ~Clock() = default;
  // Monotonic microseconds from an arbitrary origin: only differences mean
  // anything. Never goes backwards.
  virtual EventTime Now() const = 0;
};

// std::chrono::steady_clock: immune to wall-clock steps (NTP, manual changes).
class SteadyClock : public Clock {
 public:
  EventTime Now() const override {
    return std::chrono::duration_cast<std::chrono::microseconds>(
               std::chrono::steady_clock::now().time_since_epoch())
        .count();
  }
  // The process-wide instance.
  static const Clock* Get() {
    static const SteadyClock clock;
    return &clock;
  }
};

// The wall clock (std::chrono::system_clock) as event time. Only for judging
// readings' own stamps against the present (a reading far in the future);
// elapsed time is measured on a Clock.
inline EventTime WallClockNow() {
  return std::chrono::duration_cast<std::chrono::microseconds>(
             std::chrono::system_clock::now().time_since_epoch())
      .count();
}

// A clock that moves only when told. For tests.
class ManualClock : public Clock {
 public:
  explicit ManualClock(EventTime start = 0) : now_(start) {}
  EventTime Now() const override { return now_.load(); }
  void Advance(EventTime by) { now_.fetch_add(by); }

 private:
  std::atomic<EventTime> now_;
};

}  // namespace plumbline
