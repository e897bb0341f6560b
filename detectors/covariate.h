// Covariates: other series whose values help forecast this one (pallets
// shipped drive door openings; outdoor temperature drives compressor power).
// A profile names them (`covariates`); the forecaster takes each one's value
// as an extra regressor, joined as of each observation's time: the latest
// observation of the covariate at or before that time, if it is at most
// `covariate_max_age` old. A stale or missing covariate contributes its running
// mean (the effect of an average value), so a covariate that stops reporting
// neither blinds the series nor fakes a change.
//
// The values are the covariate series' observations after their own intake
// (a count's bucket totals, a meter's consumption rate, a gauge's values), each
// stamped with the end of the interval it covers.
//
// CovariateBoard keeps the last kDepth observations of each series that some
// profile names as a covariate. It is not thread-safe: each engine owns one,
// and serve routes a series to the shard of its covariates (daemon/shard.h),
// so the join happens in one shard in arrival order, as replay does.
#pragma once

#include <cstddef>
#include <deque>
#include <optional>
#include <string>
#include <string_view>
#include <unordered_map>
#include <unordered_set>
#include <vector>

#include "detectors/event_time.h"

namespace plumbline {

// Where a monitor reads its covariates from.
class CovariateSource {
 public:
  virtual ~CovariateSource() = default;
  // The value of `series` as of t: its latest observation stamped at or before
  // t and at most max_age older than t; nullopt when there is none.
  virtual std::optional<double> ValueAsOf(std::string_view series, EventTime t,
                                          EventTime max_age) const = 0;
};

// Where a monitor writes its observations when other series use it as a covariate.
class CovariateSink {
 public:
  virtual ~CovariateSink() = default;
  virtual void Publish(std::string_view series, EventTime t, double value) = 0;
};

// One observation of a covariate: its value, stamped with the end of the
// interval it covers.
struct CovariateObservation {
  EventTime t = 0;
  double value = 0.0;
  bool operator==(const CovariateObservation&) const = default;
};

class CovariateBoard : public CovariateSource, public CovariateSink {
 public:
  // Observations kept per series: enough for a series bucketed by the hour to
  // fill a gap of a few days with values as of each bucket.
  static constexpr std::size_t kDepth = 256;

  // Only the named series are kept (the names every profile lists).
  explicit CovariateBoard(std::vector<std::string> wanted = {});
  void SetWanted(std::vector<std::string> wanted);
  bool Wants(std::string_view series) const;

  void Publish(std::string_view series, EventTime t, double value) override;
  std::optional<double> ValueAsOf(std::string_view series, EventTime t,
                                  EventTime max_age) const override;

  // Checkpoints (daemon/checkpoint.h) and partition moves carry a covariate's
  // observations with its series. History: oldest first (empty when none).
  std::vector<CovariateObservation> History(std::string_view series) const;
  // Replaces the observations of `series` with `history` (time order; the
  // newest kDepth kept), if the board wants the series; else ignores them.
  void Restore(std::string_view series, const std::vector<CovariateObservation>& history);
  // Drops the observations of `series` (its state moved to another instance).
  void Forget(std::string_view series);

 private:
  using Point = CovariateObservation;
  struct Hash {
    using is_transparent = void;
    std::size_t operator()(std::string_view s) const {
      return std::hash<std::string_view>()(s);
    }
  };
  std::unordered_set<std::string, Hash, std::equal_to<>> wanted_;
  std::unordered_map<std::string, std::deque<Point>, Hash, std::equal_to<>> history_;
};

}  // namespace plumbline
