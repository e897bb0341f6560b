#include "daemon/covariate_groups.h"

#include <algorithm>
#include <mutex>

#include "daemon/text.h"
#include "detectors/glob.h"

namespace plumbline {

std::uint64_t RouteNameHash(std::string_view name) { return Fnv1a(name); }

namespace {

// Union-find over names, by index.
class Groups {
 public:
  std::size_t Add(const std::string& name) {
    auto [it, added] = index_.emplace(name, parent_.size());
    if (added) {
      parent_.push_back(parent_.size());
      names_.push_back(name);
    }
    return it->second;
  }
  std::size_t Find(std::size_t i) {
    while (parent_[i] != i) {
      parent_[i] = parent_[parent_[i]];  // path halving
      i = parent_[i];
    }
    return i;
  }
  // The group's root becomes the smaller name's, so the root of a group is
  // its smallest name however the unions came.
  void Union(std::size_t a, std::size_t b) {
    a = Find(a);
    b = Find(b);
    if (a == b) return;
    if (names_[b] < names_[a]) std::swap(a, b);
    parent_[b] = a;
  }
  const std::string& RootName(std::size_t i) { return names_[Find(i)]; }
  std::size_t Index(const std::string& name) const { return index_.at(name); }
  const std::vector<std::string>& names() const { return names_; }

 private:
  std::unordered_map<std::string, std::size_t> index_;
  std::vector<std::size_t> parent_;
  std::vector<std::string> names_;
};

}  // namespace

CovariateGroups::CovariateGroups(const Config& config) {
  Groups groups;
  for (const ProfileOptions& profile : config.series) {
    for (const std::string& name : profile.covariates) {
      groups.Union(groups.Add(profile.covariates.front()), groups.Add(name));
    }
  }
  // Chains: a covariate joins the group of the covariates its own profile
  // names. Only covariate names are looked at, so this adds no names.
  const std::vector<std::string> names = groups.names();
  for (const std::string& name : names) {
    const ProfileOptions* profile = MatchProfile(config, name);
    if (profile && !profile->covariates.empty()) {
      groups.Union(groups.Index(name), groups.Index(profile->covariates.front()));
    }
  }
  for (const std::string& name : names) {
    representative_.emplace(name, groups.RootName(groups.Index(name)));
  }
  for (const ProfileOptions& profile : config.series) {
    profiles_.emplace_back(
        profile.match, profile.covariates.empty()
                           ? std::string()
                           : groups.RootName(groups.Index(profile.covariates.front())));
  }
}

std::string CovariateGroups::RouteKey(std::string_view series) const {
  if (auto it = representative_.find(series); it != representative_.end()) {
    return it->second;
  }
  for (const auto& [match, representative] : profiles_) {
    if (!GlobMatch(match, series)) continue;
    return representative.empty() ? std::string(series) : representative;
  }
  return std::string(series);
}

std::uint64_t CovariateGroups::RouteHash(std::string_view series) const {
  if (empty()) return RouteNameHash(series);  // the common case: no lookups
  {
    std::shared_lock lock(cache_mutex_);
    if (auto it = cache_.find(series); it != cache_.end()) return it->second;
  }
  const std::uint64_t hash = RouteNameHash(RouteKey(series));
  std::unique_lock lock(cache_mutex_);
  if (cache_.size() < kMaxCached) cache_.emplace(std::string(series), hash);
  return hash;
}

bool CovariateGroups::SamePlacement(const CovariateGroups& other) const {
  if (empty() && other.empty()) return true;
  return representative_ == other.representative_ && profiles_ == other.profiles_;
}

}  // namespace plumbline
