// QuantisedSample: a sample of scores known to lie in [low, high], kept in the
// order they came, each as a 16-bit fraction of the range: a quarter of the
// memory of doubles. A series collects such a sample after warmup to re-fit a
// chart's thresholds to its own residuals (SeriesMonitor), up to 4,000 scores
// of the variance chart and as many of the arrival model; as doubles those were
// the largest part of a series' state while they filled (32 KB each for minute
// readings under a weekly profile).
//
// Each value x is stored as the level q = round((x - low) / step), with
//
//   step = (high - low) / 65535,
//
// and read back as low + q step: an error of at most step / 2 (9.3e-5 for the
// variance chart's [0, 12.25], 4.6e-5 for the arrival scores' [0, 6]). A re-fit
// chain's cells are h / 80 wide (0.1 or more for those charts), and its
// threshold is searched to 1%, so a threshold fitted to the values read back
// lies within that 1% of the one the originals need (quantised_sample_test;
// common practice, no source). On the demo, the seeded realisations and a
// million load readings, alerts and events are byte-identical to those from
// doubles. Values outside [low, high] are clamped; NaN is the caller's to
// keep out.
//
// Not thread-safe; owned by one series.
#pragma once

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <vector>

namespace plumbline {

class QuantisedSample {
 public:
  // An empty sample of values in [low, high] (low < high).
  QuantisedSample(double low, double high) : low_(low), step_((high - low) / kTop) {}

  // Appends x, clamped into [low, high] and rounded to the nearest level.
  void Add(double x) {
    const double level = std::round((x - low_) / step_);
    levels_.push_back(static_cast<std::uint16_t>(std::clamp(level, 0.0, kTop)));
  }

  // Room for n values without reallocating (a sample that fills to a known
  // size takes no more than it needs).
  void Reserve(std::size_t n) { levels_.reserve(n); }

  std::size_t size() const { return levels_.size(); }
  bool empty() const { return levels_.empty(); }

  // The values as read back, in the order they were added.
  std::vector<double> Values() const {
    std::vector<double> values;
    values.reserve(levels_.size());
    for (std::uint16_t q : levels_) values.push_back(low_ + step_ * q);
    return values;
  }

  // Empties the sample and gives its memory back.
  void Release() { std::vector<std::uint16_t>().swap(levels_); }

 private:
  static constexpr double kTop = 65535.0;  // the highest 16-bit level
  double low_;
  double step_;
  std::vector<std::uint16_t> levels_;
};

}  // namespace plumbline
