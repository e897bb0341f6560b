// Covariate groups: which series must share a shard. A series reads the
// covariates its profile names from its own engine's covariate board
// (detectors/covariate.h), so `serve` places a series, every covariate it
// names, and theirs in turn, on one shard; the as-of join then happens in one
// thread in arrival order, as in `replay`. The groups are the connected
// components of the config's covariate relations:
//
//   - the covariates one profile names form one group (any series the
//     profile matches reads them all);
//   - a covariate whose own profile (the first whose glob matches its name)
//     names covariates joins their group (chains: door openings read pallets
//     shipped, which read orders taken: all three on one shard).
//
// A union-find over the covariate names (they are exact names, never globs)
// builds them when the config loads. A series' route key is then
//
//   - for a covariate name: its group's representative;
//   - for any other name whose profile names covariates: their group's;
//   - otherwise: the series' own name (routing is unchanged where no
//     covariate is involved).
//
// The representative is the group's smallest name, so the key does not
// depend on the order of the config. Series are placed by the FNV-1a hash of
// their key (RouteHash). Finding a name's profile takes up to one glob match
// per profile, so the hashes of names resolved that way are cached (at most
// kMaxCached names; beyond that they are resolved each time).
//
// Thread-safety: const after construction but for the cache, which a mutex
// guards; RouteHash may be called from any thread.
#pragma once

#include <cstddef>
#include <cstdint>
#include <shared_mutex>
#include <string>
#include <string_view>
#include <unordered_map>
#include <utility>
#include <vector>

#include "config/config.h"

namespace plumbline {

// FNV-1a (64 bits) of a name: the hash serve places series by.
std::uint64_t RouteNameHash(std::string_view name);

class CovariateGroups {
 public:
  // Cached names; about 100 bytes each.
  static constexpr std::size_t kMaxCached = std::size_t{1} << 18;

  explicit CovariateGroups(const Config& config);
  CovariateGroups(const CovariateGroups&) = delete;
  CovariateGroups& operator=(const CovariateGroups&) = delete;

  // The name whose hash places `series` (see above).
  std::string RouteKey(std::string_view series) const;
  // RouteNameHash(RouteKey(series)), from the cache where it can.
  std::uint64_t RouteHash(std::string_view series) const;

  // No profile names a covariate: every series is placed by its own name.
  bool empty() const { return representative_.empty(); }
  // Whether `other` places every series name as this does (same groups and
  // the same profile globs leading to them). A reload that changes this
  // cannot move series already running between shards.
  bool SamePlacement(const CovariateGroups& other) const;

 private:
  struct NameHash {
    using is_transparent = void;
    std::size_t operator()(std::string_view name) const {
      return std::hash<std::string_view>{}(name);
    }
  };
  using NameMap =
      std::unordered_map<std::string, std::string, NameHash, std::equal_to<>>;

  // Each covariate name's group representative.
  NameMap representative_;
  // Per profile, in config order: its glob and the representative of the
  // group of its covariates (empty when it names none).
  std::vector<std::pair<std::string, std::string>> profiles_;

  mutable std::shared_mutex cache_mutex_;  // guards cache_
  mutable std::unordered_map<std::string, std::uint64_t, NameHash, std::equal_to<>>
      cache_;
};

}  // namespace plumbline
