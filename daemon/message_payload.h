// What the broker inputs (Kafka, MQTT) share about a message's payload: it is
// either a bare number, the reading of a series the message names otherwise
// (the Kafka key, the MQTT topic) at a time it gives otherwise (the message's
// timestamp, the time of receipt), or reading lines (DESIGN.md "Readings").
// Pure functions; thread-safe.
#pragma once

#include <string_view>

namespace plumbline {

// True, with the number in *value, when `payload` is one finite number with
// at most blanks (spaces, tabs, CR, LF) around it; false for anything else
// (then the payload is read as reading lines).
bool BareNumber(std::string_view payload, double* value);

}  // namespace plumbline
