// Writes the seed corpus of snapshot_decoder_fuzzer: for each class the
// fuzzer knows (same first byte), its saved state after a short seeded run.
//   build-fuzz/tests/fuzz/snapshot_seed_writer tests/fuzz/corpus/snapshot_decoder
#include <cstdio>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include "detectors/arrival_model.h"
#include "detectors/cusum.h"
#include "detectors/ewma.h"
#include "detectors/intake.h"
#include "detectors/page_hinkley.h"
#include "detectors/residual_profile.h"
#include "detectors/residual_scale.h"
#include "detectors/residual_whitener.h"
#include "detectors/seasonal_forecaster.h"
#include "detectors/snapshot.h"
#include "detectors/variance_cusum.h"

namespace {

using plumbline::EventTime;
constexpr EventTime kStart = 1772323200LL * plumbline::kMicrosPerSecond;
constexpr EventTime kStep = 60 * plumbline::kMicrosPerSecond;

template <typename T>
void Write(const std::string& dir, char selector, const char* name, const T& object) {
  plumbline::SnapshotWriter w;
  object.Save(w);
  std::ofstream out(dir + "/" + name, std::ios::binary);
  out.put(selector);
  out << w.bytes();
}

}  // namespace

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: snapshot_seed_writer DIR\n");
    return 2;
  }
  const std::string dir = argv[1];
  std::mt19937_64 random(20261202);
  std::normal_distribution<double> noise(0.0, 1.0);

  plumbline::SeasonalForecasterOptions forecaster_options;
  forecaster_options.seasons = {plumbline::kMicrosPerDay};
  forecaster_options.harmonics = {3};
  plumbline::SeasonalForecaster forecaster(forecaster_options);
  plumbline::Cusum cusum(plumbline::CusumOptions{});
  plumbline::PageHinkley page_hinkley(plumbline::PageHinkleyOptions{});
  plumbline::Ewma ewma(plumbline::EwmaOptions{});
  plumbline::ResidualScale scale(plumbline::ResidualScaleOptions{});
  plumbline::VarianceCusum variance(plumbline::VarianceCusumOptions{});
  plumbline::ArrivalModel arrivals(plumbline::ArrivalModelOptions{});
  plumbline::ResidualProfile profile(plumbline::kMicrosPerDay, 24, 3.0, 8);
  plumbline::ResidualWhitener whitener;
  plumbline::Intake intake(plumbline::SeriesKind::kGauge, plumbline::GapPolicy::kHold,
                           plumbline::kMicrosPerHour);
  std::vector<plumbline::Observation> observations;
  std::vector<plumbline::MeterReset> resets;
  for (int i = 0; i < 200; ++i) {
    const EventTime t = kStart + i * kStep;
    const double z = noise(random);
    (void)forecaster.Update(t, -20.0 + z);
    (void)cusum.Update(z, t);
    (void)page_hinkley.Update(z, t);
    (void)ewma.Update(z, t);
    (void)scale.Update(z);
    (void)variance.Update(z, t);
    (void)arrivals.Observe(t + static_cast<EventTime>(1e6 * z));
    profile.Update(profile.Bin(t), z, z, 1.0);
    (void)whitener.Whiten(t, z, static_cast<double>(kStep), 1.0, true);
    intake.Add(t, z, &observations, &resets);
  }
  Write(dir, 0, "forecaster", forecaster);
  Write(dir, 1, "cusum", cusum);
  Write(dir, 2, "page_hinkley", page_hinkley);
  Write(dir, 3, "ewma", ewma);
  Write(dir, 4, "residual_scale", scale);
  Write(dir, 5, "variance_cusum", variance);
  Write(dir, 6, "arrival_model", arrivals);
  Write(dir, 7, "residual_profile", profile);
  Write(dir, 8, "residual_whitener", whitener);
  Write(dir, 9, "intake", intake);
  return 0;
}
