// SeriesMonitor decisions: what the per-series pipeline does with gaps, meter
// resets, late and non-finite readings, agreement and cooldown, retrain events,
// silence, and whether it is deterministic. Streams are seeded synthetic ones
// (tests/support/synthetic_stream.h and a meter stream below). The expected
// behaviours are the product's own rules (detectors/series_monitor.h; common
// practice, no source); measured figures are printed as [figures] lines.
#include "detectors/series_monitor.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <numbers>
#include <string>
#include <vector>

#include "detectors/cusum.h"
#include "detectors/page_hinkley.h"
#include "detectors/random.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

using synthetic::MakeSyntheticStream;
using synthetic::SyntheticReading;
using synthetic::SyntheticStreamOptions;

ProfileDesign MakeDesign(const ProfileOptions& profile) {
  auto design = ProfileDesign::Make(profile);
  EXPECT_TRUE(design.ok()) << design.status().ToString();
  return design.ok() ? *design : ProfileDesign{};
}

// A stream without random gaps (tests place their own).
std::vector<SyntheticReading> Stream(long long count, std::uint64_t seed,
                                     SyntheticStreamOptions options = {}) {
  options.gap_probability = 0.0;
  return MakeSyntheticStream(options, count, seed);
}

struct Fed {
  std::vector<SeriesEvent> events;
  std::vector<size_t> reading;  // per event: index of the reading whose Observe gave it
  int late = 0, not_finite = 0;
};

Fed Feed(SeriesMonitor& monitor, const std::vector<SyntheticReading>& readings,
         bool flush = true) {
  Fed fed;
  std::vector<SeriesEvent> events;
  for (size_t i = 0; i < readings.size(); ++i) {
    events.clear();
    const ReadingVerdict verdict =
        monitor.Observe(readings[i].time, readings[i].value, &events);
    if (verdict == ReadingVerdict::kLate) ++fed.late;
    if (verdict == ReadingVerdict::kNotFinite) ++fed.not_finite;
    for (const SeriesEvent& e : events) {
      fed.events.push_back(e);
      fed.reading.push_back(i);
    }
  }
  if (flush) {
    events.clear();
    monitor.Flush(&events);
    for (const SeriesEvent& e : events) {
      fed.events.push_back(e);
      fed.reading.push_back(readings.size());
    }
  }
  return fed;
}

std::vector<SeriesEvent> Select(const std::vector<SeriesEvent>& events, EventType type,
                                std::optional<AlertKind> kind = std::nullopt) {
  std::vector<SeriesEvent> out;
  for (const SeriesEvent& e : events) {
    if (e.type == type && (!kind || e.kind == *kind)) out.push_back(e);
  }
  return out;
}

// Field-by-field equality (bitwise for the doubles: determinism means identical).
void ExpectSameEvents(const std::vector<SeriesEvent>& a,
                      const std::vector<SeriesEvent>& b) {
  ASSERT_EQ(a.size(), b.size());
  for (size_t i = 0; i < a.size(); ++i) {
    SCOPED_TRACE(i);
    EXPECT_EQ(a[i].type, b[i].type);
    EXPECT_EQ(a[i].kind, b[i].kind);
    EXPECT_EQ(a[i].direction, b[i].direction);
    EXPECT_EQ(a[i].detected_at, b[i].detected_at);
    EXPECT_EQ(a[i].change_at, b[i].change_at);
    EXPECT_EQ(a[i].window_to, b[i].window_to);
    EXPECT_EQ(a[i].detectors, b[i].detectors);
    EXPECT_EQ(a[i].magnitude, b[i].magnitude);
    EXPECT_EQ(a[i].magnitude_sd, b[i].magnitude_sd);
    EXPECT_EQ(a[i].before, b[i].before);
    EXPECT_EQ(a[i].after, b[i].after);
  }
}

std::uint32_t Bit(DetectorKind kind) { return 1u << static_cast<int>(kind); }

// ---------------------------------------------------------------------------
// (a) Gaps under `gaps: skip`

struct GapWindow {
  EventTime from, to;  // readings strictly inside are removed
};

// A seasonal stream (daily + weekly, trend, noise; no change) of 6000 readings
// every 10 minutes, with six gaps of about 3 h, 8 h, 20 h, 2 d, 3 d and 5 d
// (each length x U(0.75, 1.25)) placed 500-700 readings apart after the first 700.
std::vector<SyntheticReading> GappedStream(std::uint64_t seed,
                                           std::vector<GapWindow>* gaps,
                                           std::vector<SyntheticReading>* whole) {
  SyntheticStreamOptions options;
  *whole = Stream(6000, seed, options);
  Random rng(seed + 7919);
  const EventTime lengths[] = {3 * kMicrosPerHour,  8 * kMicrosPerHour,
                               20 * kMicrosPerHour, 2 * kMicrosPerDay,
                               3 * kMicrosPerDay,   5 * kMicrosPerDay};
  gaps->clear();
  long long index = 700;
  for (EventTime length : lengths) {
    const auto scaled = static_cast<EventTime>(static_cast<double>(length) *
                                               (0.75 + 0.5 * rng.Uniform()));
    gaps->push_back({(*whole)[static_cast<size_t>(index)].time,
                     (*whole)[static_cast<size_t>(index)].time + scaled});
    index += scaled / options.spacing + 500 + static_cast<long long>(200 * rng.Uniform());
  }
  std::vector<SyntheticReading> kept;
  for (const SyntheticReading& r : *whole) {
    bool inside = false;
    for (const GapWindow& g : *gaps) inside |= r.time > g.from && r.time < g.to;
    if (!inside) kept.push_back(r);
  }
  return kept;
}

struct GapFigures {
  int gaps = 0;
  int level_at_first_observation_after = 0;
  int level_within_20_readings_after = 0;
  int alerts_gapped = 0, alerts_whole = 0;  // all kinds
  int rate_alerts_gapped = 0, rate_alerts_whole = 0;
  int unarmed_at_gap = 0;
};

GapFigures MeasureGaps(const ProfileOptions& profile, int trials) {
  const ProfileDesign design = MakeDesign(profile);
  GapFigures f;
  for (int trial = 0; trial < trials; ++trial) {
    std::vector<GapWindow> gaps;
    std::vector<SyntheticReading> whole;
    const auto kept =
        GappedStream(3000 + static_cast<std::uint64_t>(trial), &gaps, &whole);
    SeriesMonitor gapped(&design);
    const Fed fed = Feed(gapped, kept);
    SeriesMonitor control(&design);
    const Fed control_fed = Feed(control, whole);
    for (const SeriesEvent& e : control_fed.events) {
      if (e.type != EventType::kAlert) continue;
      ++f.alerts_whole;
      if (e.kind == AlertKind::kRate) ++f.rate_alerts_whole;
    }
    for (const SeriesEvent& e : fed.events) {
      if (e.type != EventType::kAlert) continue;
      ++f.alerts_gapped;
      if (e.kind == AlertKind::kRate) ++f.rate_alerts_gapped;
    }
    for (const GapWindow& g : gaps) {
      ++f.gaps;
      // The first reading after the gap, and the end of the first observation
      // that holds post-gap data (the reading itself, or the bucket it opens).
      const auto first = std::lower_bound(
          kept.begin(), kept.end(), g.to,
          [](const SyntheticReading& r, EventTime t) { return r.time < t; });
      const size_t first_index = static_cast<size_t>(first - kept.begin());
      EventTime first_observation_end = first->time;
      if (profile.every) {
        const EventTime width = *profile.every;
        first_observation_end = first->time - first->time % width + width;
      }
      // Is the monitor armed at the gap? (It must be, or the check is empty.)
      SeriesMonitor probe(&design);
      for (size_t i = 0; i < first_index; ++i) {
        std::vector<SeriesEvent> ignored;
        probe.Observe(kept[i].time, kept[i].value, &ignored);
      }
      if (!probe.armed()) ++f.unarmed_at_gap;
      for (size_t k = 0; k < fed.events.size(); ++k) {
        const SeriesEvent& e = fed.events[k];
        if (e.type != EventType::kAlert || e.kind != AlertKind::kLevel) continue;
        if (e.detected_at >= first->time && e.detected_at <= first_observation_end) {
          ++f.level_at_first_observation_after;
          std::printf(
              "  level alert at the first observation after a gap: trial %d, %s\n", trial,
              std::string(ToString(e.direction)).c_str());
        }
        if (fed.reading[k] >= first_index && fed.reading[k] < first_index + 20) {
          ++f.level_within_20_readings_after;
        }
      }
    }
  }
  std::printf(
      "[figures] gaps: %d gaps (3h..5d); level alerts at the first observation after "
      "a gap: %d; within 20 readings after: %d; alerts of all kinds: %d gapped vs %d "
      "without the gaps; rate alerts %d vs %d\n",
      f.gaps, f.level_at_first_observation_after, f.level_within_20_readings_after,
      f.alerts_gapped, f.alerts_whole, f.rate_alerts_gapped, f.rate_alerts_whole);
  return f;
}

TEST(SeriesMonitorGapTest, GapsUnderSkipNeverRaiseALevelAlertAtTheReadingAfter) {
  ProfileOptions profile;  // gauge, seasons [1d, 7d], gaps skip, arl0 5000
  const GapFigures f = MeasureGaps(profile, 40);
  EXPECT_EQ(f.gaps, 240);
  EXPECT_EQ(f.unarmed_at_gap, 0);
  EXPECT_EQ(f.level_at_first_observation_after, 0);
}

TEST(SeriesMonitorGapTest, GapsUnderSkipWithHourBucketsNeverRaiseALevelAlertAfter) {
  ProfileOptions profile;
  profile.every = kMicrosPerHour;
  profile.warmup = 24;
  const GapFigures f = MeasureGaps(profile, 40);
  EXPECT_EQ(f.gaps, 240);
  EXPECT_EQ(f.unarmed_at_gap, 0);
  EXPECT_EQ(f.level_at_first_observation_after, 0);
}

// A gap is a silence, not a change in the arrival rate. Regression: the arrival
// model's seasonal shape once booked a whole multi-day gap as exposure without
// events, so the phases of the week it covered looked quiet and, a week later,
// normal arrivals there looked "faster" (42 rate alerts over 40 gapped streams,
// 0 without the gaps). Gaps beyond gap_cap mean gaps no longer teach the shape.
TEST(SeriesMonitorGapTest, GapsUnderSkipRaiseNoRateAlertLater) {
  ProfileOptions profile;
  const GapFigures f = MeasureGaps(profile, 40);
  EXPECT_EQ(f.rate_alerts_gapped, f.rate_alerts_whole);
}

// ---------------------------------------------------------------------------
// (b) Meter reset

// A meter read about every 30 minutes (+/- 5 min), using 10 +/- 3 units per hour
// over the day plus noise; replaced by a new meter (total 2.0) at `reset_index`.
std::vector<SyntheticReading> MeterStream(long long count, long long reset_index,
                                          std::uint64_t seed) {
  Random rng(seed);
  std::vector<SyntheticReading> out;
  const EventTime start = 1'772'323'200LL * kMicrosPerSecond;
  EventTime t = start;
  double total = 50'000.0;
  for (long long i = 0; i < count; ++i) {
    const EventTime step =
        30 * kMicrosPerMinute +
        static_cast<EventTime>((2.0 * rng.Uniform() - 1.0) * 5.0 * kMicrosPerMinute);
    const double hours = static_cast<double>(step) / kMicrosPerHour;
    const double days = static_cast<double>(t + step / 2 - start) / kMicrosPerDay;
    const double rate = 10.0 + 3.0 * std::sin(2 * std::numbers::pi * days);
    t += step;
    total += std::max(0.0, rate * hours + 0.5 * std::sqrt(hours) * rng.Normal());
    if (i == reset_index) total = 2.0;
    out.push_back({t, total});
  }
  return out;
}

void ExpectMeterResetRaisesNoAlert(const ProfileOptions& profile) {
  const ProfileDesign design = MakeDesign(profile);
  int alerts_near = 0, alerts_total = 0;
  constexpr long long kReset = 1200;
  for (int trial = 0; trial < 20; ++trial) {
    const auto readings =
        MeterStream(2000, kReset, 400 + static_cast<std::uint64_t>(trial));
    SeriesMonitor monitor(&design);
    const Fed fed = Feed(monitor, readings);
    const auto resets = Select(fed.events, EventType::kMeterReset);
    ASSERT_EQ(resets.size(), 1u) << "trial " << trial;
    EXPECT_EQ(resets[0].detected_at, readings[kReset].time);
    EXPECT_EQ(resets[0].change_at, readings[kReset].time);
    EXPECT_EQ(resets[0].before, readings[kReset - 1].value);
    EXPECT_EQ(resets[0].after, 2.0);
    for (size_t k = 0; k < fed.events.size(); ++k) {
      if (fed.events[k].type != EventType::kAlert) continue;
      ++alerts_total;
      if (fed.reading[k] >= kReset && fed.reading[k] < kReset + 100) {
        ++alerts_near;
        std::printf("  alert %s near the reset, trial %d\n",
                    std::string(ToString(fed.events[k].kind)).c_str(), trial);
      }
    }
    EXPECT_TRUE(monitor.armed());
  }
  std::printf(
      "[figures] meter reset: alerts within 100 readings after it: %d in 20 streams; "
      "alerts anywhere: %d\n",
      alerts_near, alerts_total);
  EXPECT_EQ(alerts_near, 0);
}

TEST(SeriesMonitorMeterTest, MeterReplacementGivesAResetEventAndNoAlert) {
  ProfileOptions profile;
  profile.kind = SeriesKind::kMeter;
  profile.seasons = {kMicrosPerDay};
  ExpectMeterResetRaisesNoAlert(profile);
}

TEST(SeriesMonitorMeterTest, MeterReplacementWithHourBucketsGivesAResetEventAndNoAlert) {
  ProfileOptions profile;
  profile.kind = SeriesKind::kMeter;
  profile.seasons = {kMicrosPerDay};
  profile.every = kMicrosPerHour;
  profile.warmup = 24;
  ExpectMeterResetRaisesNoAlert(profile);
}

// A level shift whose excursion opens with readings on both sides of the old
// level (as when a reading interval straddles the change, Harbourside's meter
// at the seal failure): z = -2.5, +1.3, then the new level at +9 and +5 sd.
// The variance chart's gate lets such a mixed excursion through as a change of
// spread, and its z^2 crosses the line on the same reading that completes the
// CUSUM's evidence. The level alert is the one raised there (series_monitor.cc:
// a level shift inflates z^2; the converse seldom completes a level detector's
// evidence on the very same reading).
TEST(SeriesMonitorDecisionTest, AShiftThatAlsoFiresTheVarianceChartIsALevelAlert) {
  ProfileOptions profile;
  profile.seasons = {};
  profile.warmup = 200;
  profile.arl0 = 1000;
  const ProfileDesign design = MakeDesign(profile);
  constexpr int kInControl = 1500;
  const double kTail[] = {-2.5, 1.3, 9.0, 5.0, 5.0, 5.0, 5.0, 5.0, 5.0, 5.0};
  int level_first = 0, variance_first = 0;
  for (int trial = 0; trial < 40; ++trial) {
    Random rng(5100 + static_cast<std::uint64_t>(trial));
    std::vector<SyntheticReading> readings;
    EventTime t = 1'772'323'200LL * kMicrosPerSecond;
    for (int i = 0; i < kInControl; ++i) {
      t += kMicrosPerMinute;
      readings.push_back({t, 10.0 + rng.Normal()});
    }
    for (double z : kTail) {
      t += kMicrosPerMinute;
      readings.push_back({t, 10.0 + z});
    }
    SeriesMonitor monitor(&design);
    const Fed fed = Feed(monitor, readings);
    for (size_t k = 0; k < fed.events.size(); ++k) {
      if (fed.events[k].type != EventType::kAlert || fed.reading[k] < kInControl) continue;
      if (fed.events[k].kind == AlertKind::kLevel) ++level_first;
      if (fed.events[k].kind == AlertKind::kVariance) {
        ++variance_first;
        std::printf("  trial %d: variance alert at tail reading %zu\n", trial,
                    fed.reading[k] - kInControl);
      }
      break;
    }
  }
  std::printf(
      "[figures] shift with a mixed excursion: first alert level in %d/40, variance in "
      "%d/40\n",
      level_first, variance_first);
  // Before the rule, 16 of these 40 first alerts were variance alerts (on
  // tail reading 3). A trial whose tail falls in the hold after an in-control
  // alarm (arl0 1000 over 1,300 armed readings) raises none there.
  EXPECT_EQ(variance_first, 0);
  EXPECT_GE(level_first, 34);
}

// ---------------------------------------------------------------------------
// (c) Late readings

TEST(SeriesMonitorLatenessTest, WithoutLatenessAnOutOfOrderReadingIsRefusedAndCounted) {
  const ProfileDesign design = MakeDesign(ProfileOptions{});
  const auto readings = Stream(800, 11);
  // Every 50th reading is followed by a copy 5 minutes before it (a late duplicate).
  std::vector<SyntheticReading> with_late;
  int injected = 0;
  for (size_t i = 0; i < readings.size(); ++i) {
    with_late.push_back(readings[i]);
    if (i % 50 == 49) {
      with_late.push_back({readings[i].time - 5 * kMicrosPerMinute, 1e6});
      ++injected;
    }
  }
  SeriesMonitor clean(&design), late(&design);
  const Fed clean_fed = Feed(clean, readings);
  const Fed late_fed = Feed(late, with_late);
  EXPECT_EQ(late_fed.late, injected);
  EXPECT_EQ(late.observations(), clean.observations());  // none reached the model
  ExpectSameEvents(late_fed.events, clean_fed.events);
}

TEST(SeriesMonitorLatenessTest,
     WithinLatenessReadingsAreReorderedAndProcessedInTimeOrder) {
  ProfileOptions profile;
  profile.lateness = 30 * kMicrosPerMinute;
  const ProfileDesign design = MakeDesign(profile);
  SyntheticStreamOptions options;
  options.change_index = 3200;  // a 3 sd step, so there are events to compare
  options.level_shift = 3.0;
  const auto readings = Stream(3600, 12, options);
  // Swap neighbours at random: each reading at most 20 minutes (< lateness) late.
  std::vector<SyntheticReading> shuffled = readings;
  Random rng(13);
  int swapped = 0;
  for (size_t i = 0; i + 1 < shuffled.size(); ++i) {
    if (rng.Uniform() < 0.3) {
      std::swap(shuffled[i], shuffled[i + 1]);
      ++swapped;
      ++i;
    }
  }
  SeriesMonitor in_order(&design), reordered(&design);
  const Fed a = Feed(in_order, readings);
  const Fed b = Feed(reordered, shuffled);
  std::printf("[figures] lateness: %d swapped pairs, %zu events\n", swapped,
              a.events.size());
  EXPECT_GT(swapped, 500);
  EXPECT_EQ(b.late, 0);
  EXPECT_EQ(reordered.observations(), in_order.observations());
  EXPECT_EQ(reordered.observations(), 3600);
  ASSERT_FALSE(Select(a.events, EventType::kAlert, AlertKind::kLevel).empty());
  ExpectSameEvents(b.events, a.events);
}

TEST(SeriesMonitorLatenessTest, ReadingsLaterThanTheWindowAreRefused) {
  ProfileOptions profile;
  profile.lateness = 30 * kMicrosPerMinute;
  const ProfileDesign design = MakeDesign(profile);
  SeriesMonitor monitor(&design);
  const auto readings = Stream(200, 14);
  std::vector<SeriesEvent> events;
  for (const auto& r : readings) {
    ASSERT_EQ(monitor.Observe(r.time, r.value, &events), ReadingVerdict::kAccepted);
  }
  const EventTime newest = readings.back().time;
  EXPECT_EQ(monitor.Observe(newest - 31 * kMicrosPerMinute, 20.0, &events),
            ReadingVerdict::kLate);
  EXPECT_EQ(monitor.Observe(newest - 30 * kMicrosPerMinute - 1, 20.0, &events),
            ReadingVerdict::kLate);
  EXPECT_EQ(monitor.Observe(newest - 30 * kMicrosPerMinute, 20.0, &events),
            ReadingVerdict::kAccepted);  // exactly `lateness` behind: still in time
  EXPECT_EQ(monitor.Observe(newest - 10 * kMicrosPerMinute, 20.0, &events),
            ReadingVerdict::kAccepted);
  monitor.Flush(&events);
  EXPECT_EQ(monitor.observations(), 200 + 2);  // the two refused never reached the model
}

// ---------------------------------------------------------------------------
// (d) Retrain after a level alert

TEST(SeriesMonitorRetrainTest,
     RetrainEventComesOnceWarmupObservationsOfTheNewRegimeExist) {
  int checked = 0;
  for (int warmup : {20, 48}) {
    ProfileOptions profile;
    profile.warmup = warmup;
    const ProfileDesign design = MakeDesign(profile);
    for (int trial = 0; trial < 10; ++trial) {
      SyntheticStreamOptions options;
      options.change_index = 3200;
      options.level_shift = trial % 2 ? 3.0 : -3.0;
      const auto readings =
          Stream(3500, 600 + static_cast<std::uint64_t>(trial + 100 * warmup), options);
      SeriesMonitor monitor(&design);
      const Fed fed = Feed(monitor, readings);
      // The alert for the step and the retrain event after it.
      const SeriesEvent* alert = nullptr;
      const SeriesEvent* retrain = nullptr;
      for (const SeriesEvent& e : fed.events) {
        if (!alert && e.type == EventType::kAlert && e.kind == AlertKind::kLevel &&
            e.detected_at >= readings[3200].time) {
          alert = &e;
        } else if (alert && e.type == EventType::kRetrain) {
          retrain = &e;
          break;
        } else if (alert && e.type == EventType::kAlert) {
          break;  // a later alert restarts the regime; not this check
        }
      }
      SCOPED_TRACE(testing::Message() << "warmup " << warmup << " trial " << trial);
      ASSERT_NE(alert, nullptr);
      ASSERT_NE(retrain, nullptr);
      EXPECT_EQ(retrain->change_at, alert->change_at);
      EXPECT_EQ(retrain->window_to, retrain->detected_at);
      EXPECT_GT(retrain->detected_at, alert->detected_at);
      auto count_in = [&](EventTime from, EventTime to) {
        return std::count_if(
            readings.begin(), readings.end(),
            [&](const SyntheticReading& r) { return r.time >= from && r.time <= to; });
      };
      const long long at_alert = count_in(alert->change_at, alert->detected_at);
      const long long in_window = count_in(retrain->change_at, retrain->window_to);
      // warmup observations of the new regime (one per reading here), or the
      // next observation when the alert came later than that.
      EXPECT_EQ(in_window, std::max<long long>(warmup, at_alert + 1));
      ++checked;
    }
  }
  EXPECT_EQ(checked, 20);
}

// ---------------------------------------------------------------------------
// (e) Agreement and cooldown

// Replays the monitor's own level detectors beside it: the z it reports
// (last_z, winsorised as it does) is fed to fresh copies of its CUSUM and
// Page-Hinkley, giving each detector's firing times; with agree = 2 the first
// level alert must come at the first reading where both have fired within the
// last agree_within readings.
struct AgreeOutcome {
  bool compared = false;     // false: a variance alert came first
  long long predicted = -1;  // reading index of the first agreement
  long long actual = -1;     // reading index of the first level alert
  long long first_cusum = -1, first_page_hinkley = -1;
};

// A CUSUM firing's change point and step re-estimated with the step's size
// unknown, as SeriesMonitor does (series_monitor.cc, ReestimateChange; Hinkley
// 1970), written out again here from the rule: of the excursion's start and
// each of its last 16 readings, the start tau maximising S_tau^2 / n_tau with
// the firing's sign, the excursion's start on a tie.
Alarm Reestimated(const Alarm& alarm, const std::vector<std::pair<EventTime, double>>& fed) {
  Alarm out = alarm;
  double best = alarm.shift * alarm.shift * static_cast<double>(alarm.length);
  const double sign = alarm.direction == Direction::kDown ? -1.0 : 1.0;
  const long long last = std::min<long long>({alarm.length, 16, static_cast<long long>(fed.size())});
  double sum = 0.0;
  for (long long n = 1; n <= last; ++n) {
    const auto& [time, z] = fed[fed.size() - static_cast<size_t>(n)];
    sum += z;
    if (sign * sum > 0.0 && sum * sum / static_cast<double>(n) > best) {
      best = sum * sum / static_cast<double>(n);
      out.change_at = time;
      out.length = n;
      out.shift = sum / static_cast<double>(n);
    }
  }
  return out;
}

AgreeOutcome RunAgreement(const ProfileDesign& design,
                          const std::vector<SyntheticReading>& readings, bool* mask_ok,
                          bool* change_ok) {
  SeriesMonitor monitor(&design);
  Cusum cusum(design.level.cusum);
  PageHinkley page_hinkley(design.level.page_hinkley);
  long long cusum_at = -1, page_hinkley_at = -1;
  Alarm cusum_alarm;
  std::vector<std::pair<EventTime, double>> fed;  // the shadow detectors' inputs
  AgreeOutcome out;
  const int within = design.profile.agree_within;
  std::vector<SeriesEvent> events;
  for (size_t i = 0; i < readings.size(); ++i) {
    events.clear();
    monitor.Observe(readings[i].time, readings[i].value, &events);
    if (monitor.armed() && monitor.last_z() != 0.0) {
      const double z = std::clamp(monitor.last_z(), -4.0, 4.0);  // kLevelClip
      const auto c = cusum.Update(z, readings[i].time);
      const auto p = page_hinkley.Update(z, readings[i].time);
      fed.emplace_back(readings[i].time, z);
      if (c.ok() && c->fired) {
        cusum_at = static_cast<long long>(i);
        cusum_alarm = Reestimated(*c, fed);
        if (out.first_cusum < 0) out.first_cusum = cusum_at;
      }
      if (p.ok() && p->fired) {
        page_hinkley_at = static_cast<long long>(i);
        if (out.first_page_hinkley < 0) out.first_page_hinkley = page_hinkley_at;
      }
      const long long n = static_cast<long long>(i);
      if (out.predicted < 0 && cusum_at >= 0 && page_hinkley_at >= 0 &&
          n - cusum_at < within && n - page_hinkley_at < within) {
        out.predicted = n;
      }
    }
    for (const SeriesEvent& e : events) {
      if (e.type != EventType::kAlert) continue;
      if (e.kind == AlertKind::kVariance) return out;  // resets the level detectors
      if (e.kind == AlertKind::kLevel) {
        out.compared = true;
        out.actual = static_cast<long long>(i);
        *mask_ok =
            e.detectors == (Bit(DetectorKind::kCusum) | Bit(DetectorKind::kPageHinkley));
        *change_ok =
            e.change_at == cusum_alarm.change_at && e.direction == cusum_alarm.direction;
        return out;
      }
    }
  }
  out.compared = true;
  return out;
}

TEST(SeriesMonitorAgreeTest,
     AgreeTwoAlertsExactlyWhenCusumAndPageHinkleyFireWithinTheWindow) {
  int compared = 0, alerted = 0, apart = 0, window_mattered = 0;
  for (int within : {1, 3, 10}) {
    ProfileOptions profile;
    profile.detectors = {DetectorKind::kCusum, DetectorKind::kPageHinkley};
    profile.agree = 2;
    profile.agree_within = within;
    const ProfileDesign design = MakeDesign(profile);
    for (int trial = 0; trial < 30; ++trial) {
      SyntheticStreamOptions options;
      options.change_index = 3200;
      options.level_shift = trial % 2 ? 1.0 : -1.0;
      const auto readings =
          Stream(3500, 700 + static_cast<std::uint64_t>(trial), options);
      bool mask_ok = true, change_ok = true;
      const AgreeOutcome o = RunAgreement(design, readings, &mask_ok, &change_ok);
      if (!o.compared) continue;
      SCOPED_TRACE(testing::Message() << "within " << within << " trial " << trial);
      ++compared;
      EXPECT_EQ(o.actual, o.predicted);
      if (o.actual >= 0) {
        ++alerted;
        EXPECT_TRUE(mask_ok);
        EXPECT_TRUE(change_ok);  // change_at from the most trusted detector, CUSUM
      }
      if (o.first_cusum >= 0 && o.first_page_hinkley >= 0 &&
          o.first_cusum != o.first_page_hinkley) {
        ++apart;
      }
      if (o.predicted != std::max(o.first_cusum, o.first_page_hinkley)) ++window_mattered;
    }
  }
  std::printf(
      "[figures] agree 2 of [cusum, page-hinkley]: %d runs compared, %d alerted, "
      "%d with the detectors first firing at different readings, %d where the "
      "window delayed or prevented the alert\n",
      compared, alerted, apart, window_mattered);
  // The comparison must not be empty: most runs reach a level alert, and in
  // some the two detectors first fire apart, so agreement and the window decide.
  EXPECT_GE(compared, 60);
  EXPECT_GE(alerted, 45);  // most: agreement within 1 reading is a strict rule
  EXPECT_GE(apart, 3);
  EXPECT_GE(window_mattered, 2);
}

// A step three times the designed shift is found within a few readings, but a
// CUSUM's excursion may have begun earlier on small positive z, and its start
// (the change point for a step of the designed size) then dates the change
// too early. Re-estimated with the step's size unknown (ReestimateChange),
// the alert dates it at the step's first reading more often, and measures
// the step nearer its size. A shadow CUSUM on the same z gives the estimate
// without it.
TEST(SeriesMonitorChangeTimeTest, ALargeStepIsDatedAtItsFirstReadingMoreOftenThanByTheCusum) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kCusum};
  const ProfileDesign design = MakeDesign(profile);
  int alerted = 0, exact = 0, cusum_exact = 0, early = 0, cusum_early = 0;
  double shift_error = 0, cusum_shift_error = 0;
  const double step = 3.0;
  for (int trial = 0; trial < 60; ++trial) {
    SyntheticStreamOptions options;
    options.change_index = 1500;
    options.level_shift = trial % 2 ? step : -step;
    const auto readings = Stream(1600, 900 + static_cast<std::uint64_t>(trial), options);
    SeriesMonitor monitor(&design);
    Cusum shadow(design.level.cusum);
    Alarm shadow_alarm;
    std::vector<SeriesEvent> events;
    for (size_t i = 0; i < readings.size(); ++i) {
      events.clear();
      monitor.Observe(readings[i].time, readings[i].value, &events);
      if (monitor.armed() && monitor.last_z() != 0.0) {
        const auto c = shadow.Update(std::clamp(monitor.last_z(), -4.0, 4.0), readings[i].time);
        if (c.ok() && c->fired) shadow_alarm = *c;
      }
      const auto level = std::find_if(events.begin(), events.end(), [](const SeriesEvent& e) {
        return e.type == EventType::kAlert && e.kind == AlertKind::kLevel;
      });
      if (level == events.end()) continue;
      if (i < 1500) break;  // a false alarm first: this trial says nothing
      ++alerted;
      const EventTime truth = readings[1500].time;
      exact += level->change_at == truth;
      early += level->change_at < truth;
      cusum_exact += shadow_alarm.change_at == truth;
      cusum_early += shadow_alarm.change_at < truth;
      shift_error += std::abs(std::abs(level->magnitude_sd) - step);
      cusum_shift_error += std::abs(std::abs(shadow_alarm.shift) - step);
      break;
    }
  }
  std::printf("[figures] step of %.0f sd, %d alerts: change_at at the step %d (CUSUM start %d), "
              "early %d (%d); mean step error %.2f sd (%.2f)\n",
              step, alerted, exact, cusum_exact, early, cusum_early,
              alerted ? shift_error / alerted : 0.0, alerted ? cusum_shift_error / alerted : 0.0);
  ASSERT_GE(alerted, 40);
  EXPECT_GT(exact, cusum_exact);
  EXPECT_LT(early, cusum_early);
  EXPECT_LT(shift_error, cusum_shift_error);
}

TEST(SeriesMonitorAgreeTest, AgreeTwoRaisesNoAlertWhenOnlyOneDetectorCanFire) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kCusum, DetectorKind::kPageHinkley};
  SyntheticStreamOptions options;
  options.change_index = 3200;
  options.level_shift = 4.0;
  const auto readings = Stream(3600, 21, options);
  for (int agree : {1, 2}) {
    profile.agree = agree;
    ProfileDesign design = MakeDesign(profile);
    design.level.page_hinkley.lambda = 1e12;  // Page-Hinkley can no longer fire
    SeriesMonitor monitor(&design);
    const auto levels =
        Select(Feed(monitor, readings).events, EventType::kAlert, AlertKind::kLevel);
    SCOPED_TRACE(agree);
    if (agree == 2) {
      EXPECT_TRUE(levels.empty());
    } else {
      ASSERT_FALSE(levels.empty());
      for (const SeriesEvent& e : levels)
        EXPECT_EQ(e.detectors, Bit(DetectorKind::kCusum));
    }
  }
}

// Two 3 sd steps `apart` readings apart (30 unless given): the second alert
// waits out the cooldown.
std::vector<long long> LevelAlertReadings(int cooldown, std::uint64_t seed, int warmup = 0,
                                          size_t apart = 30) {
  ProfileOptions profile;
  profile.cooldown = cooldown;
  if (warmup > 0) profile.warmup = warmup;
  const ProfileDesign design = MakeDesign(profile);
  SyntheticStreamOptions options;
  options.change_index = 3200;
  options.level_shift = 3.0;
  auto readings = Stream(3700, seed, options);
  for (size_t i = 3200 + apart; i < readings.size(); ++i) readings[i].value += 3.0;
  SeriesMonitor monitor(&design);
  const Fed fed = Feed(monitor, readings);
  std::vector<long long> at;
  for (size_t k = 0; k < fed.events.size(); ++k) {
    const SeriesEvent& e = fed.events[k];
    if (e.type == EventType::kAlert && e.kind == AlertKind::kLevel &&
        fed.reading[k] >= 3200) {
      at.push_back(static_cast<long long>(fed.reading[k]));
    }
  }
  return at;
}

TEST(SeriesMonitorAgreeTest, CooldownHoldsTheNextLevelAlertForCooldownObservations) {
  int held = 0, quick = 0;
  for (int trial = 0; trial < 10; ++trial) {
    const auto seed = 800 + static_cast<std::uint64_t>(trial);
    const auto long_cooldown = LevelAlertReadings(150, seed);
    const auto short_cooldown = LevelAlertReadings(5, seed);
    SCOPED_TRACE(trial);
    ASSERT_FALSE(long_cooldown.empty());
    ASSERT_FALSE(short_cooldown.empty());
    for (size_t k = 1; k < long_cooldown.size(); ++k) {
      EXPECT_GE(long_cooldown[k] - long_cooldown[k - 1], 150);
    }
    for (size_t k = 1; k < short_cooldown.size(); ++k) {
      EXPECT_GE(short_cooldown[k] - short_cooldown[k - 1], 5);
    }
    if (long_cooldown.size() < 2 || long_cooldown[1] - long_cooldown[0] >= 150) ++held;
    // Without the long cooldown the second step is caught soon after the first.
    if (short_cooldown.size() >= 2 && short_cooldown[1] - short_cooldown[0] < 150)
      ++quick;
  }
  std::printf(
      "[figures] cooldown: second alert held 150 readings in %d/10 streams; with "
      "cooldown 5 it came within 150 readings in %d/10\n",
      held, quick);
  EXPECT_EQ(held, 10);
  EXPECT_GE(quick, 8);  // so the long cooldown is what held it
}

// Without a `cooldown`, the hold after a level alert is the re-baselined
// model's settling time, twice the forecaster's coefficients (40 for the
// default daily and weekly seasons), not a long warmup: a second step 150
// readings after the first is found, where a cooldown as long as the warmup
// (1,000) holds it.
TEST(SeriesMonitorAgreeTest, DefaultCooldownIsTheModelsSettlingTimeNotTheWarmup) {
  int found = 0, held = 0;
  for (int trial = 0; trial < 10; ++trial) {
    const auto seed = 820 + static_cast<std::uint64_t>(trial);
    const auto by_default = LevelAlertReadings(0, seed, 1000, 150);
    const auto warmup_long = LevelAlertReadings(1000, seed, 1000, 150);
    SCOPED_TRACE(trial);
    ASSERT_FALSE(by_default.empty());
    ASSERT_FALSE(warmup_long.empty());
    for (size_t k = 1; k < by_default.size(); ++k) {
      EXPECT_GE(by_default[k] - by_default[k - 1], 40);
    }
    if (by_default.size() >= 2 && by_default[1] - by_default[0] < 300) ++found;
    if (warmup_long.size() < 2 || warmup_long[1] - warmup_long[0] >= 1000) ++held;
  }
  std::printf(
      "[figures] default cooldown: second step 150 readings on found within 300 readings "
      "of the first alert in %d/10 streams; with cooldown 1000 held in %d/10\n",
      found, held);
  EXPECT_GE(found, 8);
  EXPECT_EQ(held, 10);
}

// ---------------------------------------------------------------------------
// (f) Silence and resume

TEST(SeriesMonitorSilenceTest, SilenceAlertThenResumeOnTheNextReading) {
  ProfileOptions profile;
  profile.silence_after = kMicrosPerHour;
  const ProfileDesign design = MakeDesign(profile);
  SeriesMonitor monitor(&design);
  const auto readings = Stream(300, 31);
  Feed(monitor, readings);
  const EventTime last = readings.back().time;
  EXPECT_EQ(monitor.silence_deadline(), last + kMicrosPerHour);
  std::vector<SeriesEvent> events;
  monitor.AdvanceClock(last + kMicrosPerHour - 1, &events);
  EXPECT_TRUE(events.empty());
  monitor.AdvanceClock(last + kMicrosPerHour + 5 * kMicrosPerMinute, &events);
  ASSERT_EQ(events.size(), 1u);
  EXPECT_EQ(events[0].type, EventType::kAlert);
  EXPECT_EQ(events[0].kind, AlertKind::kSilence);
  EXPECT_EQ(events[0].detected_at, last + kMicrosPerHour);  // when it began to count
  EXPECT_EQ(events[0].change_at, last);
  EXPECT_TRUE(monitor.silent());
  monitor.AdvanceClock(last + 10 * kMicrosPerHour, &events);
  EXPECT_EQ(events.size(), 1u);  // one alert per silence
  const EventTime back = last + 12 * kMicrosPerHour;
  events.clear();
  EXPECT_EQ(monitor.Observe(back, 20.0, &events), ReadingVerdict::kAccepted);
  ASSERT_FALSE(events.empty());
  EXPECT_EQ(events[0].type, EventType::kResume);
  EXPECT_EQ(events[0].detected_at, back);
  EXPECT_EQ(events[0].change_at, last);
  EXPECT_DOUBLE_EQ(events[0].magnitude, 12 * 3600.0);
  EXPECT_FALSE(monitor.silent());
  EXPECT_EQ(monitor.silence_deadline(), back + kMicrosPerHour);
}

// Steps the clock every 5 minutes from `from` to `to`, as other series' readings would.
std::vector<SeriesEvent> Tick(SeriesMonitor& monitor, EventTime from, EventTime to) {
  std::vector<SeriesEvent> events;
  for (EventTime now = from; now <= to; now += 5 * kMicrosPerMinute) {
    monitor.AdvanceClock(now, &events);
  }
  return events;
}

TEST(SeriesMonitorSilenceTest, WithLatenessOneDropoutGivesExactlyOneSilenceAlert) {
  for (bool adaptive : {false, true}) {
    SCOPED_TRACE(adaptive ? "adaptive silence" : "silence_after 1h");
    ProfileOptions profile;
    profile.lateness = 30 * kMicrosPerMinute;
    if (!adaptive) profile.silence_after = kMicrosPerHour;
    const ProfileDesign design = MakeDesign(profile);
    SeriesMonitor monitor(&design);
    auto readings = Stream(1500, 32);  // > 1 week: the adaptive arrival shape is learned
    // Deliver them slightly out of order, within the lateness.
    for (size_t i = 0; i + 1 < readings.size(); i += 7)
      std::swap(readings[i], readings[i + 1]);
    std::vector<SeriesEvent> events;
    EventTime newest = 0;
    for (const auto& r : readings) {
      ASSERT_EQ(monitor.Observe(r.time, r.value, &events), ReadingVerdict::kAccepted);
      newest = std::max(newest, r.time);
      monitor.AdvanceClock(newest, &events);  // the clock follows the stream
    }
    ASSERT_TRUE(Select(events, EventType::kAlert, AlertKind::kSilence).empty());
    ASSERT_TRUE(monitor.silence_deadline().has_value());
    // Timed from the newest reading received, not the last one released.
    if (!adaptive) {
      EXPECT_EQ(*monitor.silence_deadline(), newest + kMicrosPerHour);
    }
    // Dropout: two days of clock ticks.
    auto silence = Tick(monitor, newest, newest + 2 * kMicrosPerDay);
    ASSERT_EQ(Select(silence, EventType::kAlert, AlertKind::kSilence).size(), 1u);
    EXPECT_EQ(silence[0].change_at, newest);
    // The stream comes back (out of order again): one resume, and no second silence.
    const EventTime back = newest + 2 * kMicrosPerDay + kMicrosPerMinute;
    std::vector<SeriesEvent> after;
    for (int k = 0; k < 12; ++k) {
      const EventTime t = back + (k ^ 1) * 10 * kMicrosPerMinute;  // pairs swapped
      ASSERT_EQ(monitor.Observe(t, 20.0, &after), ReadingVerdict::kAccepted);
      monitor.AdvanceClock(back + k * 10 * kMicrosPerMinute, &after);
    }
    EXPECT_EQ(Select(after, EventType::kResume).size(), 1u);
    EXPECT_TRUE(Select(after, EventType::kAlert, AlertKind::kSilence).empty());
    // A second dropout is a second silence.
    const EventTime second_newest = back + 11 * 10 * kMicrosPerMinute;
    auto second = Tick(monitor, second_newest, second_newest + 2 * kMicrosPerDay);
    EXPECT_EQ(Select(second, EventType::kAlert, AlertKind::kSilence).size(), 1u);
  }
}

// ---------------------------------------------------------------------------
// (g) Determinism and (h) non-finite values

// A stream with a level step, a variance change, gaps and a dropout with clock ticks.
std::vector<SeriesEvent> EventfulRun(SeriesMonitor& monitor, std::uint64_t seed) {
  SyntheticStreamOptions options;
  options.gap_probability = 0.003;
  options.change_index = 2500;
  options.level_shift = 2.0;
  auto readings = MakeSyntheticStream(options, 4000, seed);
  Random rng(seed + 1);
  for (size_t i = 3300; i < readings.size(); ++i) readings[i].value += 1.5 * rng.Normal();
  std::vector<SeriesEvent> events;
  for (const auto& r : readings) {
    monitor.Observe(r.time, r.value, &events);
    monitor.AdvanceClock(r.time, &events);
  }
  const EventTime last = readings.back().time;
  for (EventTime now = last; now < last + kMicrosPerDay; now += kMicrosPerHour) {
    monitor.AdvanceClock(now, &events);
  }
  monitor.Observe(last + kMicrosPerDay, 25.0, &events);
  monitor.Flush(&events);
  return events;
}

TEST(SeriesMonitorDeterminismTest, SameReadingsGiveIdenticalEventsTwice) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kCusum, DetectorKind::kPageHinkley,
                       DetectorKind::kBocpd, DetectorKind::kEwma};
  profile.silence_after = 3 * kMicrosPerHour;
  const ProfileDesign design = MakeDesign(profile);
  for (std::uint64_t seed : {41u, 42u, 43u}) {
    SeriesMonitor first(&design);
    const auto a = EventfulRun(first, seed);
    SeriesMonitor second(&design);
    const auto b = EventfulRun(second, seed);
    SCOPED_TRACE(seed);
    ASSERT_GE(a.size(), 3u);  // alert, retrain, silence, resume at least
    ExpectSameEvents(a, b);
    EXPECT_EQ(first.observations(), second.observations());
    EXPECT_EQ(first.last_z(), second.last_z());
    EXPECT_EQ(first.residual_autocorrelation(), second.residual_autocorrelation());
  }
}

TEST(SeriesMonitorFiniteTest, NonFiniteValuesAreRefusedAndNeverReachTheModel) {
  const ProfileDesign design = MakeDesign(ProfileOptions{});
  SyntheticStreamOptions options;
  options.change_index = 1500;
  options.level_shift = 3.0;
  const auto readings = Stream(2000, 51, options);
  std::vector<SyntheticReading> with_bad;
  const double bad[] = {std::numeric_limits<double>::quiet_NaN(),
                        std::numeric_limits<double>::infinity(),
                        -std::numeric_limits<double>::infinity()};
  int injected = 0;
  for (size_t i = 0; i < readings.size(); ++i) {
    if (i % 97 == 3) {
      // Between this reading and the one before, so time order is kept.
      const EventTime t =
          i ? (readings[i - 1].time + readings[i].time) / 2 : readings[i].time;
      with_bad.push_back({t, bad[injected % 3]});
      ++injected;
    }
    with_bad.push_back(readings[i]);
  }
  SeriesMonitor clean(&design), dirty(&design);
  const Fed clean_fed = Feed(clean, readings);
  const Fed dirty_fed = Feed(dirty, with_bad);
  EXPECT_EQ(dirty_fed.not_finite, injected);
  EXPECT_EQ(dirty.observations(), clean.observations());
  EXPECT_EQ(dirty.last_z(), clean.last_z());
  EXPECT_TRUE(std::isfinite(dirty.scale().sigma()));
  ExpectSameEvents(dirty_fed.events, clean_fed.events);
  ASSERT_FALSE(Select(clean_fed.events, EventType::kAlert, AlertKind::kLevel).empty());
}

TEST(SeriesMonitorFiniteTest,
     NonFiniteReadingNeitherResumesASilentSeriesNorDelaysSilence) {
  ProfileOptions profile;
  profile.silence_after = kMicrosPerHour;
  const ProfileDesign design = MakeDesign(profile);
  SeriesMonitor monitor(&design);
  const auto readings = Stream(100, 52);
  Feed(monitor, readings);
  const EventTime last = readings.back().time;
  std::vector<SeriesEvent> events;
  // A NaN inside the hour does not count as the stream being alive.
  EXPECT_EQ(monitor.Observe(last + 30 * kMicrosPerMinute,
                            std::numeric_limits<double>::quiet_NaN(), &events),
            ReadingVerdict::kNotFinite);
  EXPECT_EQ(monitor.silence_deadline(), last + kMicrosPerHour);
  monitor.AdvanceClock(last + 2 * kMicrosPerHour, &events);
  ASSERT_EQ(events.size(), 1u);
  EXPECT_EQ(monitor.Observe(last + 3 * kMicrosPerHour,
                            std::numeric_limits<double>::infinity(), &events),
            ReadingVerdict::kNotFinite);
  EXPECT_EQ(events.size(), 1u);  // no resume
  EXPECT_TRUE(monitor.silent());
}

}  // namespace
}  // namespace plumbline

namespace plumbline {
namespace {

// A local level stream (common practice, no source): y = level + N(0, 1),
// the level a random walk with variance q per reading, one reading a minute.
std::vector<std::pair<EventTime, double>> LocalLevelStream(double q, int count,
                                                           std::uint64_t seed) {
  Random random(seed);
  std::vector<std::pair<EventTime, double>> readings;
  double level = 10.0;
  for (int i = 0; i < count; ++i) {
    level += std::sqrt(q) * random.Normal();
    readings.emplace_back(kMicrosPerDay + i * kMicrosPerMinute, level + random.Normal());
  }
  return readings;
}

struct LevelNoiseRun {
  double chosen_q = -1.0;
  int level_alerts = 0;
};

LevelNoiseRun RunLevelNoise(const ProfileDesign& design,
                            const std::vector<std::pair<EventTime, double>>& readings) {
  SeriesMonitor monitor(&design);
  LevelNoiseRun run;
  std::vector<SeriesEvent> events;
  for (const auto& [t, v] : readings) {
    events.clear();
    monitor.Observe(t, v, &events);
    for (const SeriesEvent& e : events) {
      if (e.type == EventType::kAlert && e.kind == AlertKind::kLevel) ++run.level_alerts;
    }
  }
  run.chosen_q = monitor.forecaster()->options().level_noise;
  return run;
}

ProfileOptions LevelNoiseProfile(bool automatic) {
  ProfileOptions profile;
  profile.seasons = {};
  profile.trend = false;
  profile.warmup = 300;
  profile.arl0 = 5000;
  profile.level_noise_auto = automatic;
  return profile;
}

TEST(SeriesMonitorLevelNoiseTest, AutoFindsAWanderingLevelAndStopsItsFalseAlarms) {
  const ProfileDesign automatic = MakeDesign(LevelNoiseProfile(true));
  const ProfileDesign off = MakeDesign(LevelNoiseProfile(false));
  int chosen_near = 0, alerts_auto = 0, alerts_off = 0;
  constexpr int kTrials = 20;
  for (int trial = 0; trial < kTrials; ++trial) {
    const auto readings = LocalLevelStream(0.3, 3000, 900 + trial);
    const LevelNoiseRun a = RunLevelNoise(automatic, readings);
    const LevelNoiseRun o = RunLevelNoise(off, readings);
    if (a.chosen_q >= 0.1 && a.chosen_q <= 1.0) ++chosen_near;  // the grid around 0.3
    alerts_auto += a.level_alerts;
    alerts_off += o.level_alerts;
  }
  std::printf(
      "[figures] level_noise auto on a local level stream (q 0.3): q in [0.1, 1] in "
      "%d/%d; level alerts %d with auto, %d with off, over %d x 3000 readings\n",
      chosen_near, kTrials, alerts_auto, alerts_off, kTrials);
  EXPECT_GE(chosen_near, 18);
  // At least twice fewer (measured 2.6x; 4x before residual whitening, which now
  // absorbs part of a held level's wander and so spares some of its false alarms).
  EXPECT_LE(alerts_auto * 2, alerts_off);
  EXPECT_LE(alerts_auto, kTrials);         // ~1 false alarm per stream at most
}

TEST(SeriesMonitorLevelNoiseTest, AutoKeepsTheFixedLevelOnWhiteNoise) {
  const ProfileDesign automatic = MakeDesign(LevelNoiseProfile(true));
  int plain = 0;
  constexpr int kTrials = 40;
  for (int trial = 0; trial < kTrials; ++trial) {
    const auto readings = LocalLevelStream(0.0, 400, 1900 + trial);
    if (RunLevelNoise(automatic, readings).chosen_q == 0.0) ++plain;
  }
  std::printf("[figures] level_noise auto on white noise: plain level kept in %d/%d\n",
              plain, kTrials);
  // The test is at the 5% level, a little more with six candidates.
  EXPECT_GE(plain, 34);
}

}  // namespace
}  // namespace plumbline

namespace plumbline {
namespace {

// Annotations (series_monitor.h): a step the staff announced re-baselines the
// series and does not raise unexplained alerts; a maintenance window holds
// alerts back as suppressed events. Common practice, no source.
TEST(SeriesMonitorAnnotationTest,
     APlannedStepRaisesNoUnexplainedAlertAndRetrainsFromItsTime) {
  const ProfileDesign design = MakeDesign(ProfileOptions{});
  int explained = 0, unexplained = 0, retrains_from_t = 0;
  for (int trial = 0; trial < 10; ++trial) {
    SyntheticStreamOptions options;
    options.change_index = 3200;
    options.level_shift = trial % 2 ? 3.0 : -3.0;
    const auto readings = Stream(3800, 4100 + static_cast<std::uint64_t>(trial), options);
    const EventTime t = readings[3200].time;
    Annotation planned;
    planned.id = "new-schedule";
    planned.kind = AnnotationKind::kPlannedChange;
    planned.at = t;
    planned.within = 2 * kMicrosPerHour;
    SeriesMonitor monitor(&design);
    monitor.SetAnnotations({planned});
    const Fed fed = Feed(monitor, readings);
    for (const SeriesEvent& e : fed.events) {
      if (e.type == EventType::kRetrain && e.change_at == t) ++retrains_from_t;
      if (e.type != EventType::kAlert || e.detected_at < t) continue;
      if (e.kind == AlertKind::kSilence) continue;
      (e.annotation == "new-schedule" ? explained : unexplained) += 1;
    }
  }
  std::printf(
      "[figures] planned 3-sd steps: %d explained alerts, %d unexplained, %d/10 retrain "
      "events from the planned time\n",
      explained, unexplained, retrains_from_t);
  EXPECT_EQ(retrains_from_t, 10);
  EXPECT_LE(unexplained,
            2);  // the re-baselined model may still meet an ordinary false alarm
}

TEST(SeriesMonitorAnnotationTest, AStepThatComesBeforeItsAnnouncedTimeIsMarkedExplained) {
  const ProfileDesign design = MakeDesign(ProfileOptions{});
  int explained = 0, unexplained = 0;
  for (int trial = 0; trial < 10; ++trial) {
    SyntheticStreamOptions options;
    options.change_index = 3200;
    options.level_shift = trial % 2 ? 3.0 : -3.0;
    const auto readings = Stream(3800, 4100 + static_cast<std::uint64_t>(trial), options);
    // Announced for ten readings (about 95 minutes) after it really happened,
    // so the detectors see it first; change_at lands within `within` of it.
    Annotation planned;
    planned.id = "new-schedule";
    planned.at = readings[3210].time;
    planned.within = 3 * kMicrosPerHour;
    SeriesMonitor monitor(&design);
    monitor.SetAnnotations({planned});
    for (const SeriesEvent& e : Feed(monitor, readings).events) {
      if (e.type != EventType::kAlert || e.detected_at < readings[3200].time) continue;
      if (e.kind == AlertKind::kSilence) continue;
      (e.annotation == "new-schedule" ? explained : unexplained) += 1;
    }
  }
  std::printf(
      "[figures] steps ten readings before their announced time: %d alerts explained, "
      "%d not\n",
      explained, unexplained);
  EXPECT_GE(explained, 9);
  EXPECT_LE(unexplained, 2);
}

TEST(SeriesMonitorAnnotationTest, MaintenanceWindowTurnsAlertsIntoSuppressedEvents) {
  const ProfileDesign design = MakeDesign(ProfileOptions{});
  int suppressed = 0, alerts_inside = 0, alerts_without = 0;
  for (int trial = 0; trial < 10; ++trial) {
    SyntheticStreamOptions options;
    options.change_index = 3200;
    options.level_shift = 3.0;
    const auto readings = Stream(3500, 5100 + static_cast<std::uint64_t>(trial), options);
    Annotation window;
    window.id = "compressor-service";
    window.kind = AnnotationKind::kMaintenance;
    window.from = readings[3190].time;
    window.to = readings[3499].time + 1;
    SeriesMonitor held(&design), plain(&design);
    held.SetAnnotations({window});
    for (const SeriesEvent& e : Feed(held, readings).events) {
      if (e.type == EventType::kSuppressed) {
        EXPECT_EQ(e.annotation, "compressor-service");
        ++suppressed;
      }
      if (e.type == EventType::kAlert && e.detected_at >= window.from) ++alerts_inside;
    }
    for (const SeriesEvent& e : Feed(plain, readings).events) {
      if (e.type == EventType::kAlert && e.detected_at >= window.from) ++alerts_without;
    }
  }
  EXPECT_EQ(alerts_inside, 0);
  EXPECT_EQ(suppressed, alerts_without);  // held back, not lost
  EXPECT_GE(suppressed, 10);              // each step was seen
}


// Counts of a daily-seasonal mean, Poisson, every 10 minutes; the mean steps
// by `step` counts from reading `change` on. Invented data.
std::vector<SyntheticReading> Counts(double level, long long count, long long change,
                                     double step, std::uint64_t seed) {
  Random random(seed);
  std::vector<SyntheticReading> out;
  EventTime t = 1'772'323'200LL * kMicrosPerSecond;
  for (long long i = 0; i < count; ++i) {
    t += 10 * kMicrosPerMinute;
    const double phase = 2 * std::numbers::pi * static_cast<double>(t % kMicrosPerDay) /
                         static_cast<double>(kMicrosPerDay);
    const double mean = level * (1 + 0.5 * std::sin(phase)) + (i >= change ? step : 0.0);
    out.push_back({t, static_cast<double>(random.Poisson(mean))});
  }
  return out;
}

TEST(SeriesMonitorCountChartTest, LowCountsGetTheCountCusumUnlessTheProfileSaysOtherwise) {
  ProfileOptions profile;
  profile.kind = SeriesKind::kCount;
  profile.seasons = {kMicrosPerDay};
  struct Expectation {
    double level;
    CountChart chart;
    bool count_chart;
  };
  for (const Expectation& x : {Expectation{2.0, CountChart::kAuto, true},
                               Expectation{40.0, CountChart::kAuto, false},
                               Expectation{2.0, CountChart::kNormal, false},
                               Expectation{40.0, CountChart::kPoisson, true}}) {
    SCOPED_TRACE(x.level);
    profile.count_chart = x.chart;
    const ProfileDesign design = MakeDesign(profile);
    SeriesMonitor monitor(&design);
    Feed(monitor, Counts(x.level, 400, -1, 0.0, 3), false);
    EXPECT_EQ(monitor.count_chart(), x.count_chart);
  }
  // Overdispersed low counts (each reading's mean 0.3 or 1.7 times the
  // season's at random: variance about 3 times the mean at mean 4) keep the
  // normal CUSUM under auto.
  {
    profile.count_chart = CountChart::kAuto;
    const ProfileDesign design = MakeDesign(profile);
    SeriesMonitor monitor(&design);
    Random random(4);
    std::vector<SyntheticReading> readings = Counts(4.0, 400, -1, 0.0, 3);
    for (SyntheticReading& r : readings) {
      r.value = static_cast<double>(
          random.Poisson((random.Uniform() < 0.5 ? 0.3 : 1.7) * std::max(r.value, 0.5)));
    }
    Feed(monitor, readings, false);
    EXPECT_FALSE(monitor.count_chart());
  }
  // Gauges never.
  profile.kind = SeriesKind::kGauge;
  profile.count_chart = CountChart::kPoisson;
  const ProfileDesign gauge = MakeDesign(profile);
  SeriesMonitor monitor(&gauge);
  Feed(monitor, Counts(2.0, 400, -1, 0.0, 3), false);
  EXPECT_FALSE(monitor.count_chart());
}

TEST(SeriesMonitorCountChartTest, CountCusumFindsARiseAndADropOfLowCountsAndDatesThem) {
  ProfileOptions profile;
  profile.kind = SeriesKind::kCount;
  profile.seasons = {kMicrosPerDay};
  const ProfileDesign design = MakeDesign(profile);
  // Mean 2 per reading; +3 counts (about 2 sd) and then -1.5 from reading 3000.
  for (double step : {3.0, -1.5}) {
    SCOPED_TRACE(step);
    SeriesMonitor monitor(&design);
    const auto readings = Counts(2.0, 3400, 3000, step, 21);
    const Fed fed = Feed(monitor, readings);
    ASSERT_TRUE(monitor.count_chart());
    const auto levels = Select(fed.events, EventType::kAlert, AlertKind::kLevel);
    std::vector<SeriesEvent> after;
    for (size_t i = 0; i < fed.events.size(); ++i) {
      const SeriesEvent& e = fed.events[i];
      if (e.type == EventType::kAlert && e.kind == AlertKind::kLevel &&
          fed.reading[i] >= 3000) {
        after.push_back(e);
      }
    }
    ASSERT_FALSE(after.empty());
    EXPECT_EQ(after[0].direction, step > 0 ? Direction::kUp : Direction::kDown);
    EXPECT_LE(std::abs(after[0].change_at - readings[3000].time), 12 * 10 * kMicrosPerMinute);
    EXPECT_GT(after[0].magnitude * step, 0.0);
    // Before the change: at most the false-alarm budget allows (3000 readings at
    // arl0 5000, half of it for level alerts: expect about 0.3).
    EXPECT_LE(levels.size() - after.size(), 2u);
  }
}

}  // namespace
}  // namespace plumbline
