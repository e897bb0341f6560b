// PrefetchRange: asks the processor to start loading [data, data + bytes) into
// the caches, so a later touch does not wait on memory. A hint only: it changes
// no result, and costs one instruction per cache line. Thread-safe.
#pragma once

#include <cstddef>

namespace plumbline {

inline void PrefetchRange(const void* data, std::size_t bytes) {
  constexpr std::size_t kLine = 64;
  const char* p = static_cast<const char*>(data);
  for (std::size_t at = 0; at < bytes; at += kLine) __builtin_prefetch(p + at);
}

}  // namespace plumbline
