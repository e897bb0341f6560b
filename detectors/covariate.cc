#include "detectors/covariate.h"

#include <algorithm>

namespace plumbline {

CovariateBoard::CovariateBoard(std::vector<std::string> wanted) {
  SetWanted(std::move(wanted));
}

void CovariateBoard::SetWanted(std::vector<std::string> wanted) {
  wanted_.clear();
  for (std::string& name : wanted) wanted_.insert(std::move(name));
  std::erase_if(history_,
                [&](const auto& entry) { return !wanted_.contains(entry.first); });
}

bool CovariateBoard::Wants(std::string_view series) const {
  return wanted_.find(series) != wanted_.end();
}

void CovariateBoard::Publish(std::string_view series, EventTime t, double value) {
  if (!Wants(series)) return;
  auto it = history_.find(series);
  if (it == history_.end())
    it = history_.emplace(std::string(series), std::deque<Point>()).first;
  std::deque<Point>& points = it->second;
  // Observations of one series come in time order; should one not, it is
  // placed where it belongs, so an as-of join never reads past its time.
  auto at = std::upper_bound(points.begin(), points.end(), t,
                             [](EventTime time, const Point& p) { return time < p.t; });
  points.insert(at, {t, value});
  if (points.size() > kDepth) points.pop_front();
}

std::optional<double> CovariateBoard::ValueAsOf(std::string_view series, EventTime t,
                                                EventTime max_age) const {
  const auto it = history_.find(series);
  if (it == history_.end()) return std::nullopt;
  const std::deque<Point>& points = it->second;
  auto after =
      std::upper_bound(points.begin(), points.end(), t,
                       [](EventTime time, const Point& p) { return time < p.t; });
  if (after == points.begin()) return std::nullopt;
  const Point& latest = *std::prev(after);
  if (t - latest.t > max_age) return std::nullopt;
  return latest.value;
}

std::vector<CovariateObservation> CovariateBoard::History(std::string_view series) const {
  const auto it = history_.find(series);
  if (it == history_.end()) return {};
  return std::vector<CovariateObservation>(it->second.begin(), it->second.end());
}

void CovariateBoard::Restore(std::string_view series,
                             const std::vector<CovariateObservation>& history) {
  if (!Wants(series)) return;
  Forget(series);
  for (const CovariateObservation& point : history) Publish(series, point.t, point.value);
}

void CovariateBoard::Forget(std::string_view series) {
  if (auto it = history_.find(series); it != history_.end()) history_.erase(it);
}

}  // namespace plumbline
