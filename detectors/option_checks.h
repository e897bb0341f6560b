// Small helpers shared by the detectors' option checks and input refusals, so
// every detector words its messages alike. Internal to detectors/; pure
// functions, thread-safe.
#pragma once

#include <cmath>
#include <cstdio>
#include <string>
#include <utility>

#include "detectors/status.h"

namespace plumbline::option_checks {

// A number as it appears in messages ("%g").
inline std::string Format(double value) {
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%g", value);
  return buffer;
}

// Sets *why (when given) and returns false, for IsValid's one-line rules.
inline bool Fail(std::string* why, std::string message) {
  if (why != nullptr) *why = std::move(message);
  return false;
}

// The refusal of a non-finite reading. Kept out of line so the message is built
// only on the refused path.
[[gnu::noinline, gnu::cold]] inline Status RefuseReading(double x) {
  return Status::InvalidArgument("reading must be a finite number; got " + Format(x));
}

// The rule every detector's arl0 field follows: 0 (not calibrated) or >= 1.
inline bool Arl0IsValid(double arl0, std::string* why) {
  if (!(arl0 == 0.0 || (std::isfinite(arl0) && arl0 >= 1.0))) {
    return Fail(why, "arl0 must be 0 (not calibrated) or finite and >= 1; got " + Format(arl0));
  }
  return true;
}

// The rules of a CUSUM side's decision interval: h finite and > 0, headstart
// in [0, h).
inline bool DecisionIntervalIsValid(double h, double headstart, std::string* why) {
  if (!(std::isfinite(h) && h > 0.0)) {
    return Fail(why, "h must be finite and > 0; got " + Format(h));
  }
  if (!(headstart >= 0.0 && headstart < h)) {
    return Fail(why, "headstart must be in [0, h) with h = " + Format(h) + "; got " +
                         Format(headstart));
  }
  return true;
}

}  // namespace plumbline::option_checks
