// libFuzzer target for the snapshot decoder (detectors/snapshot.h) and the
// Load of every committed stateful class that a checkpoint restores.
//
// The first byte picks the class; the rest is its saved state. Whatever the
// bytes, Load must fail cleanly (never read out of bounds, never allocate
// without bound) or give an object that saves, loads into a fresh object and
// saves again to the same bytes. Any crash, sanitizer report or difference is
// a finding. Using a loaded state is out of scope here: checkpoint files carry
// a CRC-32C that refuses corrupted bytes before any Load. A forged state that
// passes it is refused by the range checks of each Load (counts, times,
// finite sums: SnapshotReader::Counter and the like), added after an earlier
// version of this target, which also ran an update, found Page-Hinkley and
// EWMA counts overflowing; tests/detectors/snapshot_test.cc forges them.
// BOCPD and the series monitor are not here (clang 14 cannot build bocpd.cc's
// AVX-512 path); ForgedStateTest covers their Loads.
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string>
#include <string_view>

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

void Require(bool condition) {
  if (!condition) std::abort();
}

// Loads `bytes` into a fresh object from `make`; if that works, checks the
// round trip.
template <typename Make>
void CheckMade(const Make& make, std::string_view bytes) {
  auto object = make();
  plumbline::SnapshotReader reader(bytes);
  if (!object.Load(reader).ok()) return;
  plumbline::SnapshotWriter first;
  object.Save(first);
  auto copy = make();
  plumbline::SnapshotReader again(first.bytes());
  Require(copy.Load(again).ok());
  Require(again.AtEnd());
  plumbline::SnapshotWriter second;
  copy.Save(second);
  Require(first.bytes() == second.bytes());
}

template <typename T, typename Options>
void Check(const Options& options, std::string_view bytes) {
  CheckMade([&options] { return T(options); }, bytes);
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 1) return 0;
  const std::string_view bytes(reinterpret_cast<const char*>(data + 1), size - 1);
  switch (data[0] % 10) {
    case 0: {
      plumbline::SeasonalForecasterOptions options;
      options.seasons = {plumbline::kMicrosPerDay};
      options.harmonics = {3};
      Check<plumbline::SeasonalForecaster>(options, bytes);
      break;
    }
    case 1:
      Check<plumbline::Cusum>(plumbline::CusumOptions{}, bytes);
      break;
    case 2:
      Check<plumbline::PageHinkley>(plumbline::PageHinkleyOptions{}, bytes);
      break;
    case 3:
      Check<plumbline::Ewma>(plumbline::EwmaOptions{}, bytes);
      break;
    case 4:
      Check<plumbline::ResidualScale>(plumbline::ResidualScaleOptions{}, bytes);
      break;
    case 5:
      Check<plumbline::VarianceCusum>(plumbline::VarianceCusumOptions{}, bytes);
      break;
    case 6:
      Check<plumbline::ArrivalModel>(plumbline::ArrivalModelOptions{}, bytes);
      break;
    case 7:  // a day of 24 bins pooled by 8-hour phase, as the monitor makes it
      CheckMade([] { return plumbline::ResidualProfile(plumbline::kMicrosPerDay, 24, 3.0, 8); },
                bytes);
      break;
    case 8:
      CheckMade([] { return plumbline::ResidualWhitener(); }, bytes);
      break;
    case 9:
      CheckMade(
          [] {
            return plumbline::Intake(plumbline::SeriesKind::kGauge, plumbline::GapPolicy::kHold,
                                     plumbline::kMicrosPerHour);
          },
          bytes);
      break;
  }
  return 0;
}
