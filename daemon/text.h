// Text helpers shared by the parser, the alert log and the HTTP API: UTF-8
// well-formedness, JSON literals and a stable string hash. Pure functions; thread-safe.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>

namespace plumbline {

// 64-bit FNV-1a of `text`, continuing from `hash` (the offset basis by
// default): stable across builds and platforms, for ids, routing and file
// names; not for anything an adversary may choose to collide.
inline std::uint64_t Fnv1a(std::string_view text, std::uint64_t hash = 1469598103934665603ULL) {
  for (unsigned char c : text) {
    hash ^= c;
    hash *= 1099511628211ULL;
  }
  return hash;
}

// Length of the well-formed UTF-8 sequence at p[0..n) (Unicode 15, table 3-7:
// no overlong forms, no surrogates, nothing above U+10FFFF), or 0 if there is
// none. Precondition: n > 0.
std::size_t Utf8SequenceLength(const unsigned char* p, std::size_t n);

// Appends `text` as a JSON string literal: quotes, backslashes and control
// characters escaped; bytes that are not valid UTF-8 replaced by U+FFFD, so
// the output is always valid JSON.
void AppendJsonString(std::string_view text, std::string* out);
// Appends a number in its shortest round-trip form; null when not finite.
void AppendJsonNumber(double value, std::string* out);

}  // namespace plumbline
