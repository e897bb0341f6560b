// Checkpoint state: the encoding (detectors/snapshot.h), its checksum, and
// SeriesMonitor::Save / Load. The property that matters (common practice, no
// source): a monitor restored from a snapshot taken at any point continues
// exactly as the monitor that was never saved, event for event and bit for
// bit; a snapshot that is cut short or made for another design is refused.
#include "detectors/snapshot.h"

#include <gtest/gtest.h>

#include <bit>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "detectors/arrival_model.h"
#include "detectors/bocpd.h"
#include "detectors/cusum.h"
#include "detectors/ewma.h"
#include "detectors/intake.h"
#include "detectors/page_hinkley.h"
#include "detectors/residual_profile.h"
#include "detectors/residual_scale.h"
#include "detectors/residual_whitener.h"
#include "detectors/seasonal_forecaster.h"
#include "detectors/series_monitor.h"
#include "detectors/variance_cusum.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

TEST(Crc32cTest, MatchesPublishedCheckValues) {
  // CRC-32C of the ASCII digits "123456789": 0xE3069283 (the "check" value of
  // CRC-32/ISCSI in Greg Cook's Catalogue of parametrised CRC algorithms; MEM).
  EXPECT_EQ(Crc32c("123456789"), 0xE3069283u);
  // 32 zero bytes: 0x8A9136AA (RFC 3720, appendix B.4, which lists the
  // bytes as sent, aa 36 91 8a; MEM).
  EXPECT_EQ(Crc32c(std::string(32, '\0')), 0x8A9136AAu);
  // 32 bytes 0xFF: 0x62A8AB43 (same appendix, 43 ab a8 62; MEM).
  EXPECT_EQ(Crc32c(std::string(32, '\xff')), 0x62A8AB43u);
  // Chaining over pieces gives the checksum of the whole.
  EXPECT_EQ(Crc32c("6789", Crc32c("12345")), 0xE3069283u);
}

// Where the crc32 instruction is used, it agrees with the byte table on every
// length and alignment (the tail bytes, the 8-byte words and their seams).
TEST(Crc32cTest, InstructionAndTableAgree) {
  std::printf("[figures] crc32c on the crc32 instruction: %s\n",
              crc32c_internal::UsesInstruction() ? "yes" : "no (byte table only)");
  std::string bytes(300, '\0');
  std::uint32_t x = 12345;
  for (char& b : bytes) {
    x = x * 1103515245u + 12345u;
    b = static_cast<char>(x >> 16);
  }
  for (std::size_t offset = 0; offset < 9; ++offset) {
    for (std::size_t length = 0; offset + length <= bytes.size(); length += 7) {
      const std::string_view piece(bytes.data() + offset, length);
      ASSERT_EQ(Crc32c(piece, 0x1234u), crc32c_internal::Portable(piece, 0x1234u))
          << "offset " << offset << " length " << length;
    }
  }
  EXPECT_EQ(crc32c_internal::Portable("123456789", 0), 0xE3069283u);
}

TEST(SnapshotCodingTest, RoundTripsEveryFieldBitForBit) {
  SnapshotWriter w;
  w.Tag("TEST");
  w.U8(7);
  w.Bool(true);
  w.U32(0xDEADBEEFu);
  w.I64(-1234567890123LL);
  w.F64(-0.0);
  w.F64(1.0 / 3.0);
  w.String("coldstore/freezer-1/temp_c");
  w.DoubleVector({1.5, -2.5});
  w.OptionalI64(std::nullopt);
  w.OptionalI64(42);
  const std::string bytes = w.Take();
  SnapshotReader r(bytes);
  EXPECT_TRUE(r.Tag("TEST"));
  EXPECT_EQ(r.U8(), 7);
  EXPECT_TRUE(r.Bool());
  EXPECT_EQ(r.U32(), 0xDEADBEEFu);
  EXPECT_EQ(r.I64(), -1234567890123LL);
  const double zero = r.F64();
  EXPECT_TRUE(zero == 0.0 && std::signbit(zero));
  EXPECT_EQ(r.F64(), 1.0 / 3.0);
  EXPECT_EQ(r.String(), "coldstore/freezer-1/temp_c");
  EXPECT_EQ(r.DoubleVector(), (std::vector<double>{1.5, -2.5}));
  EXPECT_FALSE(r.OptionalI64().has_value());
  EXPECT_EQ(r.OptionalI64(), 42);
  EXPECT_TRUE(r.ok());
  EXPECT_TRUE(r.AtEnd());
}

TEST(SnapshotCodingTest, ReaderStopsAtTheEndAndAtAWrongTag) {
  SnapshotWriter w;
  w.Tag("AAAA");
  w.U64(1000);  // a length with nothing after it
  const std::string bytes = w.Take();
  SnapshotReader wrong(bytes);
  EXPECT_FALSE(wrong.Tag("BBBB"));
  EXPECT_EQ(wrong.status().code(), Status::Code::kCorruption);
  SnapshotReader r(bytes);
  EXPECT_TRUE(r.Tag("AAAA"));
  EXPECT_TRUE(r.DoubleVector().empty());  // 1000 doubles are not there
  EXPECT_FALSE(r.ok());
  EXPECT_EQ(r.U64(), 0u);  // sticky
}

TEST(SnapshotCodingTest, CheckedReadsRefuseValuesOutOfTheirRange) {
  const auto read = [](const std::function<void(SnapshotWriter&)>& write,
                       const std::function<void(SnapshotReader&)>& check) {
    SnapshotWriter w;
    write(w);
    SnapshotReader r(w.bytes());
    check(r);
    return r.ok();
  };
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double inf = std::numeric_limits<double>::infinity();
  EXPECT_TRUE(read([](SnapshotWriter& w) { w.I64(SnapshotReader::kMaxCounter); },
                   [](SnapshotReader& r) { r.Counter("n"); }));
  for (std::int64_t bad :
       {std::int64_t{-1}, SnapshotReader::kMaxCounter + 1, INT64_MAX}) {
    EXPECT_FALSE(read([bad](SnapshotWriter& w) { w.I64(bad); },
                      [](SnapshotReader& r) { EXPECT_EQ(r.Counter("n"), 0); }))
        << bad;
  }
  EXPECT_TRUE(read([](SnapshotWriter& w) { w.I64(-SnapshotReader::kMaxTime); },
                   [](SnapshotReader& r) { r.Time("t"); }));
  for (std::int64_t bad : {INT64_MIN, SnapshotReader::kMaxTime + 1}) {
    EXPECT_FALSE(read([bad](SnapshotWriter& w) { w.I64(bad); },
                      [](SnapshotReader& r) { r.Time("t"); }))
        << bad;
  }
  for (double bad : {nan, inf, -inf}) {
    EXPECT_FALSE(read([bad](SnapshotWriter& w) { w.F64(bad); },
                      [](SnapshotReader& r) { r.Finite("x"); }));
  }
  EXPECT_FALSE(read([](SnapshotWriter& w) { w.F64(-0.5); },
                    [](SnapshotReader& r) { r.NonNegative("x"); }));
  EXPECT_TRUE(read([](SnapshotWriter& w) { w.F64(0.0); },
                   [](SnapshotReader& r) { r.NonNegative("x"); }));
}

// A detector's saved state with one field replaced: its Load must refuse it
// (fuzzing found the updates after such a Load overflowing signed counts).
// `field` counts the 8-byte fields after the 4-byte tag.
template <typename T, typename Options>
Status LoadForged(const Options& options, int field, std::uint64_t bits) {
  T original(options);
  SnapshotWriter w;
  original.Save(w);
  std::string bytes = w.Take();
  for (int i = 0; i < 8; ++i)
    bytes[4 + 8 * field + i] = static_cast<char>(bits >> (8 * i));
  T loaded(options);
  SnapshotReader r(bytes);
  return loaded.Load(r);
}

std::uint64_t Bits(double v) { return std::bit_cast<std::uint64_t>(v); }

TEST(ForgedStateTest, EachDetectorRefusesOverflowingCountsAndNonFiniteSums) {
  const std::uint64_t huge = static_cast<std::uint64_t>(INT64_MAX);
  const std::uint64_t minus_one = ~std::uint64_t{0};
  const std::uint64_t nan = Bits(std::numeric_limits<double>::quiet_NaN());
  // Page-Hinkley: per side sum, statistic, length, start, sum before, count
  // before; then sum, reference mean, readings (field 14), alarms (15).
  EXPECT_FALSE((LoadForged<PageHinkley>(PageHinkleyOptions{}, 14, huge).ok()));
  EXPECT_FALSE((LoadForged<PageHinkley>(PageHinkleyOptions{}, 2, minus_one).ok()));
  EXPECT_FALSE((LoadForged<PageHinkley>(PageHinkleyOptions{}, 5, 7).ok()));  // > readings
  EXPECT_FALSE((LoadForged<PageHinkley>(PageHinkleyOptions{}, 0, nan).ok()));
  EXPECT_TRUE((LoadForged<PageHinkley>(PageHinkleyOptions{}, 15, 3).ok()));
  // EWMA: z, decay power, squared limit, per run start, length, sum; then
  // readings (field 9), alarms (10).
  EXPECT_FALSE((LoadForged<Ewma>(EwmaOptions{}, 9, huge).ok()));
  EXPECT_FALSE((LoadForged<Ewma>(EwmaOptions{}, 4, minus_one).ok()));
  EXPECT_FALSE((LoadForged<Ewma>(EwmaOptions{}, 0, nan).ok()));
  EXPECT_FALSE((LoadForged<Ewma>(EwmaOptions{}, 3, huge).ok()));  // a start out of range
  EXPECT_TRUE((LoadForged<Ewma>(EwmaOptions{}, 10, 3).ok()));
  // CUSUM: per side value, origin, length, start; then readings (8), alarms (9).
  EXPECT_FALSE((LoadForged<Cusum>(CusumOptions{}, 8, huge).ok()));
  EXPECT_FALSE((LoadForged<Cusum>(CusumOptions{}, 2, minus_one).ok()));
  EXPECT_FALSE((LoadForged<Cusum>(CusumOptions{}, 1, nan).ok()));
  // Variance CUSUM: thresholds, then per side statistic, start, n, sum, sum of squares.
  EXPECT_FALSE((LoadForged<VarianceCusum>(VarianceCusumOptions{}, 4, Bits(-1.0)).ok()));
  EXPECT_FALSE((LoadForged<VarianceCusum>(VarianceCusumOptions{}, 0, nan).ok()));
  // Residual scale: variance, sigma, count, window in use (more than the window).
  EXPECT_FALSE((LoadForged<ResidualScale>(ResidualScaleOptions{}, 2, huge).ok()));
  EXPECT_FALSE((LoadForged<ResidualScale>(ResidualScaleOptions{}, 3, 100000).ok()));
  EXPECT_FALSE((LoadForged<ResidualScale>(ResidualScaleOptions{}, 0, Bits(-1.0)).ok()));
  // Arrival model: thresholds, mean gap, gaps (3), used, arrivals, last time (6).
  EXPECT_FALSE((LoadForged<ArrivalModel>(ArrivalModelOptions{}, 3, huge).ok()));
  EXPECT_FALSE((LoadForged<ArrivalModel>(ArrivalModelOptions{}, 6, huge).ok()));
  EXPECT_FALSE((LoadForged<ArrivalModel>(ArrivalModelOptions{}, 2, nan).ok()));
}

// The saved state of `original` with the 8 bytes at byte `at` replaced by
// `bits`, loaded into `fresh` (built like the original). For the classes whose
// fields are not all 8 bytes wide, or whose layout depends on their state.
template <typename T>
Status LoadPatched(const T& original, T& fresh, std::size_t at, std::uint64_t bits) {
  SnapshotWriter w;
  original.Save(w);
  std::string bytes = w.Take();
  if (at + 8 > bytes.size()) return Status::InvalidArgument("patch past the end");
  for (int i = 0; i < 8; ++i) bytes[at + i] = static_cast<char>(bits >> (8 * i));
  SnapshotReader r(bytes);
  return fresh.Load(r);
}

std::uint64_t U64At(const std::string& bytes, std::size_t at) {
  std::uint64_t v = 0;
  for (int i = 0; i < 8; ++i)
    v |= std::uint64_t{static_cast<std::uint8_t>(bytes[at + i])} << (8 * i);
  return v;
}

// A forged state is refused as corruption, and the reason names the field.
::testing::AssertionResult RefusedNaming(const Status& status, std::string_view field) {
  if (status.code() != Status::Code::kCorruption) {
    return ::testing::AssertionFailure() << "not refused as corruption: " << status.ToString();
  }
  if (status.message().find(field) == std::string::npos) {
    return ::testing::AssertionFailure() << "'" << status.message() << "' does not name '"
                                         << field << "'";
  }
  return ::testing::AssertionSuccess();
}

// Deterministic readings with a step, so the run-length posterior holds
// several states (some pruned) when saved.
double Wave(int i) { return std::sin(0.7 * i) + (i > 40 ? 2.0 : 0.0); }

constexpr std::uint64_t kHuge = static_cast<std::uint64_t>(INT64_MAX);
constexpr std::uint64_t kMinusOne = ~std::uint64_t{0};
const std::uint64_t kNan = Bits(std::numeric_limits<double>::quiet_NaN());

std::string Saved(const SeriesMonitor& monitor);  // below

TEST(ForgedStateTest, RunLengthPosteriorRefusesImpossibleSizesRunLengthsAndWeights) {
  const BocpdOptions options;
  RunLengthPosterior original(options);
  for (int i = 0; i < 60; ++i) original.Update(Wave(i));
  SnapshotWriter w;
  original.Save(w);
  const std::string bytes = w.Take();
  // "RUNL", slots, begin, end; then per state mu, beta, log mass, weight,
  // birth; map slot, scale, log shift, the recent readings, their position,
  // readings, log evidence, last log predictive.
  const std::size_t begin = U64At(bytes, 12), end = U64At(bytes, 20);
  const std::size_t n = end - begin;
  ASSERT_GE(n, 3u);
  const std::size_t mu = 28, beta = mu + 8 * n, weight = mu + 24 * n, birth = mu + 32 * n;
  const std::size_t map_slot = mu + 40 * n, scale = map_slot + 8;
  const std::size_t readings = scale + 16 + 8 + 8 * (options.max_run_length + 1) + 8;
  ASSERT_EQ(U64At(bytes, readings), 60u);  // the layout above is right
  auto load = [&](std::size_t at, std::uint64_t bits) {
    RunLengthPosterior fresh(options);
    return LoadPatched(original, fresh, at, bits);
  };
  EXPECT_TRUE(load(weight, Bits(0.5)).ok());  // a weight in range loads
  // Sizes: more states than the cap allows, or an end past the buffers.
  EXPECT_TRUE(RefusedNaming(load(20, begin + options.max_run_length + 2), "cap"));
  EXPECT_TRUE(RefusedNaming(load(20, std::uint64_t{1} << 40), "cap"));
  EXPECT_TRUE(RefusedNaming(load(12, end), "cap"));  // no state at all
  // Non-finite or negative where a probability or a variance is.
  EXPECT_TRUE(RefusedNaming(load(weight, kNan), "run-length weight"));
  EXPECT_TRUE(RefusedNaming(load(weight + 8, Bits(-0.25)), "run-length weight"));
  EXPECT_TRUE(RefusedNaming(load(beta, Bits(-1.0)), "run-length rate"));
  EXPECT_TRUE(RefusedNaming(load(mu, Bits(std::numeric_limits<double>::infinity())),
                            "run-length mean"));
  EXPECT_TRUE(RefusedNaming(load(scale, Bits(0.0)), "run-length scale"));
  // Counts and run lengths: the update indexes tables by them.
  EXPECT_TRUE(RefusedNaming(load(readings, kHuge), "run-length readings"));
  EXPECT_TRUE(RefusedNaming(load(birth, kMinusOne), "impossible run length"));
  EXPECT_TRUE(RefusedNaming(load(birth + 8 * (n - 1), 61), "impossible run length"));
  EXPECT_TRUE(RefusedNaming(load(birth, 60), "impossible run length"));  // order
  EXPECT_TRUE(RefusedNaming(load(map_slot, end), "cap"));
}

TEST(ForgedStateTest, BocpdRefusesAProbabilityAboveOneAndANegativeAlarmCount) {
  BocpdOptions options;
  Bocpd original(options);
  for (int i = 0; i < 80; ++i) ASSERT_TRUE(original.Update(Wave(i), i).ok());
  SnapshotWriter w;
  original.Save(w);
  const std::size_t size = w.bytes().size();
  // The state ends with the change probability, the "above" flag and alarms.
  auto load = [&](std::size_t at, std::uint64_t bits) {
    Bocpd fresh(options);
    return LoadPatched(original, fresh, at, bits);
  };
  EXPECT_TRUE(load(size - 8, 2).ok());
  EXPECT_TRUE(RefusedNaming(load(size - 8, kMinusOne), "BOCPD alarms"));
  EXPECT_TRUE(RefusedNaming(load(size - 17, Bits(2.0)), "BOCPD change probability"));
  EXPECT_TRUE(RefusedNaming(load(size - 17, kNan), "BOCPD change probability"));
}

TEST(ForgedStateTest,
     ForecasterRefusesOtherDimensionsNonFiniteCoefficientsNegativeVariancesAsymmetry) {
  SeasonalForecasterOptions options;
  options.seasons = {kMicrosPerDay};
  options.harmonics = {3};
  SeasonalForecaster original(options);
  for (int i = 0; i < 50; ++i) ASSERT_TRUE(original.Update(i * kMicrosPerHour, Wave(i)).ok());
  const std::size_t n = static_cast<std::size_t>(original.dimension());
  // "FCST", memory, level noise, its unit, n; theta (n), P (n x n); last and
  // first time, updates, the pending flag (1 byte) and update.
  const std::size_t theta = 36, p = theta + 8 * n, t_ref = p + 8 * n * n;
  const std::size_t updates = t_ref + 16, xpx = updates + 8 + 1 + 24;
  auto load = [&](std::size_t at, std::uint64_t bits) {
    SeasonalForecaster fresh(options);
    return LoadPatched(original, fresh, at, bits);
  };
  EXPECT_TRUE(load(updates, 50).ok());
  EXPECT_TRUE(RefusedNaming(load(28, n + 1), "coefficients"));
  EXPECT_TRUE(RefusedNaming(load(28, kHuge), "coefficients"));
  EXPECT_TRUE(RefusedNaming(load(theta + 8, kNan), "forecaster coefficient"));
  EXPECT_TRUE(RefusedNaming(load(p + 8, kNan), "forecaster covariance"));
  EXPECT_TRUE(RefusedNaming(load(p + 8 * (n + 1), Bits(-1.0)), "variance of coefficient 1"));
  EXPECT_TRUE(RefusedNaming(load(p + 8 * n, Bits(0.125)), "not symmetric"));  // P(0, 1) alone
  EXPECT_TRUE(RefusedNaming(load(4, 0), "memory"));
  EXPECT_TRUE(RefusedNaming(load(12, Bits(-0.5)), "level noise"));
  EXPECT_TRUE(RefusedNaming(load(12, Bits(5000.0)), "level noise"));
  EXPECT_TRUE(RefusedNaming(load(updates, kMinusOne), "forecaster updates"));
  EXPECT_TRUE(RefusedNaming(load(t_ref, kHuge), "forecaster last time"));
  EXPECT_TRUE(RefusedNaming(load(t_ref + 8, 100 * kMicrosPerHour), "first time"));
  EXPECT_TRUE(RefusedNaming(load(xpx, kNan), "pending variance factor"));
}

// A day of 24 bins pooled by 8, after 200 readings of a wave.
ResidualProfile UntrainedProfile() { return ResidualProfile(kMicrosPerDay, 24, 3.0, 8); }
ResidualProfile TrainedProfile() {
  ResidualProfile profile = UntrainedProfile();
  for (int i = 0; i < 200; ++i) {
    const EventTime t = i * 20 * kMicrosPerMinute;
    profile.Update(profile.Bin(t), Wave(i), Wave(i), 1.0);
  }
  return profile;
}

TEST(ForgedStateTest, ResidualProfileRefusesOtherBinCountsAndNegativeOrNonFiniteBins) {
  const ResidualProfile original = TrainedProfile();
  // "PRF3", the pooled bins' season (8 hours) and count (8), 24 bins (count,
  // mean, variance ratio), 8 pooled bins.
  auto load = [&](std::size_t at, std::uint64_t bits) {
    ResidualProfile fresh = UntrainedProfile();
    return LoadPatched(original, fresh, at, bits);
  };
  EXPECT_TRUE(load(28, Bits(3.0)).ok());
  EXPECT_TRUE(RefusedNaming(load(4, 5 * kMicrosPerHour), "season out of range"));
  EXPECT_TRUE(RefusedNaming(load(4, kMicrosPerDay), "season out of range"));
  EXPECT_TRUE(RefusedNaming(load(12, 7), "season out of range"));
  EXPECT_TRUE(RefusedNaming(load(20, 25), "bins differ"));
  EXPECT_FALSE(load(20, kHuge).ok());  // longer than the state: refused before allocating
  EXPECT_TRUE(RefusedNaming(load(28, Bits(-1.0)), "bin count"));
  EXPECT_TRUE(RefusedNaming(load(36, kNan), "bin mean"));
  EXPECT_TRUE(RefusedNaming(load(44, Bits(-0.1)), "bin variance ratio"));
  // Bins are single precision since 2ad64d4: a value beyond it is refused
  // rather than kept as an infinity that saves a state nothing can load
  // (snapshot_decoder_fuzzer found that in seconds).
  EXPECT_TRUE(RefusedNaming(load(28, Bits(1e39)), "single-precision range"));
  EXPECT_TRUE(RefusedNaming(load(36, Bits(-1e300)), "single-precision range"));
  EXPECT_TRUE(RefusedNaming(load(44, Bits(4e38)), "single-precision range"));
  // Then the spreads between bins, each a flag, of means and of ratios: 804 on.
  EXPECT_TRUE(RefusedNaming(load(805, Bits(-1.0)), "spread of means"));
  EXPECT_TRUE(RefusedNaming(load(822, kNan), "spread of means"));
  EXPECT_TRUE(RefusedNaming(load(830, Bits(-1.0)), "spread of ratios"));
  // Then the moments of the squared readings (838 on) and the readings since
  // the spreads were estimated (a u32).
  EXPECT_TRUE(RefusedNaming(load(838, Bits(-1.0)), "kurtosis count"));
  EXPECT_TRUE(RefusedNaming(load(854, kNan), "fourth moment"));
}

// The phase bins may be narrower than the long ones: a week of 7 x 4 long
// bins over a day of 8 phase bins (each long bin spans two phases) saves its
// geometry and loads into a profile made without it, as the monitor makes one.
TEST(ForgedStateTest, ResidualProfileWithNarrowerPhaseBinsCarriesItsSeason) {
  const EventTime week = 7 * kMicrosPerDay;
  ResidualProfile original(week, 28, 3.0, 8, kMicrosPerDay);
  ASSERT_EQ(original.fold_bins(), 8);
  for (int i = 0; i < 2000; ++i) {
    const EventTime t = i * 20 * kMicrosPerMinute;
    original.Update(original.Bin(t), Wave(i), Wave(i), 1.0);
  }
  SnapshotWriter w;
  original.Save(w);
  ResidualProfile fresh(week, 28, 3.0, 8);  // 8 does not divide 28: one level until loaded
  ASSERT_EQ(fresh.fold_bins(), 0);
  SnapshotReader r(w.bytes());
  ASSERT_TRUE(fresh.Load(r).ok());
  EXPECT_TRUE(r.AtEnd());
  EXPECT_EQ(fresh.fold_period(), kMicrosPerDay);
  for (int h = 0; h < 7 * 24; ++h) {
    const EventTime t = h * kMicrosPerHour + 1;
    EXPECT_EQ(fresh.Bin(t), original.Bin(t));
    EXPECT_EQ(fresh.Mean(fresh.Bin(t), 1.0), original.Mean(original.Bin(t), 1.0)) << h;
    EXPECT_EQ(fresh.Sigma(fresh.Bin(t), 1.0), original.Sigma(original.Bin(t), 1.0)) << h;
  }
}

// The layouts before the phase bins' season was kept ("PRF2") and before the
// spreads were kept ("PROF": the bins only) still load, with phase bins as
// wide as the long ones: the bins as saved; PROF's spreads start unestimated
// and the next reading estimates them again.
TEST(ForgedStateTest, ResidualProfileReadsTheLayoutsWithoutCountsSeasonOrSpreads) {
  const ResidualProfile original = TrainedProfile();
  SnapshotWriter w;
  original.Save(w);
  const std::string now = w.Take();
  ASSERT_EQ(now.substr(0, 4), "PRF4");
  // The counts' part, none learned here: no bins (a count), the pool's flag,
  // ratio and spread, and its reading count.
  constexpr std::size_t kNoCounts = 8 + 1 + 8 + 8 + 4;
  const std::string body = now.substr(4, now.size() - 4 - kNoCounts);
  for (const std::string& older : {"PRF3" + body, "PRF2" + body.substr(16)}) {
    // PRF2 lacks the season and its bins as well.
    ResidualProfile fresh = UntrainedProfile();
    SnapshotReader r(older);
    ASSERT_TRUE(fresh.Load(r).ok()) << older.substr(0, 4);
    EXPECT_TRUE(r.AtEnd());
    SnapshotWriter again;
    fresh.Save(again);
    EXPECT_EQ(again.bytes(), now) << older.substr(0, 4);
  }
  const std::string rest = body.substr(16);
  // Tag, 24 bins and 8 pooled bins (each a count and 24 bytes a bin).
  const std::size_t bins_end = 8 + 24 * 24 + 8 + 8 * 24;
  ResidualProfile fresh = UntrainedProfile();
  const std::string oldest = "PROF" + rest.substr(0, bins_end);
  SnapshotReader r(oldest);
  ASSERT_TRUE(fresh.Load(r).ok());
  EXPECT_TRUE(r.AtEnd());
  SnapshotWriter again;
  fresh.Save(again);
  EXPECT_EQ(again.bytes().substr(0, 4 + 16 + bins_end), now.substr(0, 4 + 16 + bins_end));
  fresh.Update(0, 0.5, 0.5, 1.0);
  for (int t = 0; t < 24; ++t) {
    const int key = fresh.Bin(t * kMicrosPerHour);
    EXPECT_TRUE(std::isfinite(fresh.Mean(key, 1.0)) && fresh.Sigma(key, 1.0) > 0) << t;
  }
}

// Counts' ratios survive a round trip; a forged count of their bins, a
// negative count seen and a pool flag without counts are refused.
TEST(ForgedStateTest, ResidualProfileCarriesItsCountRatios) {
  ResidualProfile original = TrainedProfile();
  for (int i = 0; i < 400; ++i) {
    const EventTime t = i * 20 * kMicrosPerMinute;
    original.UpdateCount(original.Bin(t), (t % kMicrosPerDay) < 8 * kMicrosPerHour ? 0 : 3, 2.0);
  }
  ASSERT_TRUE(original.CountRatio(0).has_value());
  SnapshotWriter w;
  original.Save(w);
  const std::string now = w.Take();
  ResidualProfile fresh = UntrainedProfile();
  SnapshotReader r(now);
  ASSERT_TRUE(fresh.Load(r).ok());
  EXPECT_TRUE(r.AtEnd());
  for (int h = 0; h < 24; ++h) {
    const int key = fresh.Bin(h * kMicrosPerHour);
    EXPECT_EQ(fresh.CountRatio(key), original.CountRatio(key)) << h;
  }
  // The counts' part starts after the bins' count (8) and 24 bins of 16 bytes.
  const std::size_t counts = now.size() - (8 + 24 * 16 + 1 + 8 + 8 + 4);
  auto load = [&](std::size_t at, std::uint64_t bits) {
    ResidualProfile forged = UntrainedProfile();
    return LoadPatched(original, forged, at, bits);
  };
  EXPECT_TRUE(RefusedNaming(load(counts, 23), "count bins differ"));
  EXPECT_TRUE(RefusedNaming(load(counts + 8, Bits(-1.0)), "counts seen"));
  EXPECT_TRUE(RefusedNaming(load(counts + 16, kNan), "counts expected"));
}

TEST(ForgedStateTest, WhitenerRefusesOverflowingCountsAndAPersistenceOfOneOrMore) {
  ResidualWhitener original;
  for (int i = 0; i < 300; ++i)
    original.Whiten(i * kMicrosPerMinute, Wave(i), kMicrosPerMinute, 1.0, true);
  // "WHIT", a flag (1 byte), previous time, state mean and variance, two
  // residuals, lags, a flag; pairs (54), triples (62), four moments, rho1,
  // phi (110), c (118).
  auto load = [&](std::size_t at, std::uint64_t bits) {
    ResidualWhitener fresh;
    return LoadPatched(original, fresh, at, bits);
  };
  EXPECT_TRUE(load(110, Bits(0.5)).ok());
  EXPECT_TRUE(RefusedNaming(load(54, kHuge), "whitener pairs"));
  EXPECT_TRUE(RefusedNaming(load(62, 301), "more triples than pairs"));
  EXPECT_TRUE(RefusedNaming(load(21, Bits(-1.0)), "whitener state variance"));
  EXPECT_TRUE(RefusedNaming(load(13, kNan), "whitener state mean"));
  EXPECT_TRUE(RefusedNaming(load(45, kNan), "whitener lags"));
  EXPECT_TRUE(RefusedNaming(load(110, Bits(1.0)), "persistence"));
  EXPECT_TRUE(RefusedNaming(load(118, Bits(0.0)), "signal share"));
}

TEST(ForgedStateTest, IntakeRefusesTimesOutOfRangeNonFiniteValuesAndOffBoundaryBuckets) {
  const auto make = [] {
    return Intake(SeriesKind::kGauge, GapPolicy::kHold, kMicrosPerHour);
  };
  Intake original = make();
  std::vector<Observation> out;
  std::vector<MeterReset> resets;
  for (int i = 0; i < 30; ++i) original.Add(i * 7 * kMicrosPerMinute, Wave(i), &out, &resets);
  // "INTK", a flag, last time (5), last value (13), a flag, bucket (22), sum,
  // covered (38), two flags, last emitted bucket (48) and value, unfilled (64).
  auto load = [&](std::size_t at, std::uint64_t bits) {
    Intake fresh = make();
    return LoadPatched(original, fresh, at, bits);
  };
  EXPECT_TRUE(load(64, 3).ok());
  EXPECT_TRUE(RefusedNaming(load(64, kMinusOne), "intake unfilled buckets"));
  EXPECT_TRUE(RefusedNaming(load(5, kHuge), "intake last time"));
  EXPECT_TRUE(RefusedNaming(load(13, kNan), "intake last value"));
  EXPECT_TRUE(RefusedNaming(load(38, Bits(-1.0)), "intake bucket coverage"));
  EXPECT_TRUE(RefusedNaming(load(22, 3 * kMicrosPerHour + 1), "bucket boundary"));
}

TEST(ForgedStateTest, SeriesMonitorRefusesOversizedBuffersAndCountsOutOfRange) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kCusum, DetectorKind::kBocpd};
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok()) << design.status().ToString();
  const auto readings = synthetic::MakeSyntheticStream({}, 400, 7);
  std::vector<SeriesEvent> ignored;
  auto load = [&](const SeriesMonitor& original, std::size_t at, std::uint64_t bits) {
    SeriesMonitor fresh(&*design);
    return LoadPatched(original, fresh, at, bits);
  };
  {
    // Before the forecaster starts: "SMN5", no forecaster (1 byte), then the
    // held observations (count at 5; from, to, value, covariates).
    SeriesMonitor early(&*design);
    for (int i = 0; i < 3; ++i) early.Observe(readings[i].time, readings[i].value, &ignored);
    ASSERT_EQ(U64At(Saved(early), 5), 3u);
    EXPECT_TRUE(load(early, 29, Bits(1.5)).ok());
    EXPECT_TRUE(RefusedNaming(load(early, 5, 100), "held observations"));
    EXPECT_TRUE(RefusedNaming(load(early, 29, kNan), "held observation value"));
    EXPECT_TRUE(RefusedNaming(load(early, 13, kHuge), "held observation start"));
  }
  SeriesMonitor armed(&*design);
  for (const auto& r : readings) armed.Observe(r.time, r.value, &ignored);
  const std::string bytes = Saved(armed);
  // Near the tail: ... the regime's start, the regime's observations; then
  // the sum of readings (8 bytes), a flag (1), the empty count-chart sample
  // (8), a flag (1) and the calibration health ("HLTH").
  const std::size_t health = bytes.rfind("HLTH");
  ASSERT_NE(health, std::string::npos);
  EXPECT_TRUE(RefusedNaming(load(armed, health - 26, kMinusOne), "regime observations"));
  EXPECT_TRUE(RefusedNaming(load(armed, health - 18, kNan), "sum of readings"));
  EXPECT_FALSE(load(armed, health - 9, 5000).ok());  // runs past the end
  // The adapted threshold (8 bytes), the settled flag (1), then the level
  // detectors' recent inputs: their count (8), 16 z and 16 times (8 bytes
  // each); last, the refit hold (8).
  const std::size_t recent = bytes.size() - (8 + 16 * 8 + 16 * 8 + 8);
  EXPECT_TRUE(RefusedNaming(load(armed, recent - 9, kNan), "adapted threshold"));
  EXPECT_TRUE(RefusedNaming(load(armed, bytes.size() - 8, kMinusOne), "refit hold"));
  EXPECT_TRUE(RefusedNaming(load(armed, recent + 8 + 5 * 8, kNan), "recent z"));
  EXPECT_TRUE(RefusedNaming(load(armed, recent + 8 + 16 * 8 + 5 * 8, kHuge), "recent z time"));
  EXPECT_TRUE(load(armed, recent, 12345).ok());  // any count: slots are taken modulo 16
  // Around the intake: the reorder buffer's newest and released times before
  // it, the observation count after it (the intake is 72 bytes).
  const std::size_t intake = bytes.find("INTK");
  ASSERT_NE(intake, std::string::npos);
  ASSERT_EQ(U64At(bytes, intake + 72), 400u);
  EXPECT_TRUE(RefusedNaming(load(armed, intake + 72, kHuge), "observations"));
  EXPECT_TRUE(RefusedNaming(load(armed, intake - 16, kHuge), "newest reading time"));
  EXPECT_TRUE(RefusedNaming(load(armed, intake - 8, U64At(bytes, intake - 16) + 1),
                            "released reading is newer"));
  EXPECT_TRUE(load(armed, intake - 8, U64At(bytes, intake - 16) - 1).ok());
  // The last level detector's firing: its length (8 bytes), then its
  // threshold fraction (8), before the empty list of held readings (8) and
  // the reorder times.
  ASSERT_EQ(U64At(bytes, intake - 24), 0u);
  EXPECT_TRUE(RefusedNaming(load(armed, intake - 40, kMinusOne), "level firing length"));
}

struct Case {
  const char* name;
  ProfileOptions profile;
  synthetic::SyntheticStreamOptions stream;
};

std::vector<Case> Cases() {
  std::vector<Case> cases;
  {
    Case c{"all_level_detectors_with_a_shift", {}, {}};
    c.profile.detectors = {DetectorKind::kCusum, DetectorKind::kPageHinkley,
                           DetectorKind::kBocpd, DetectorKind::kEwma};
    c.stream.change_index = 900;
    c.stream.level_shift = 3.0;
    cases.push_back(c);
  }
  {
    Case c{"variance_change_and_a_stop", {}, {}};
    c.stream.change_index = 700;
    c.stream.sd_ratio = 2.5;
    c.stream.stop_index = 1300;
    c.profile.silence_after = 6 * kMicrosPerHour;
    cases.push_back(c);
  }
  {
    Case c{"counts_bucketed_with_lateness_and_auto_level_noise", {}, {}};
    c.profile.kind = SeriesKind::kCount;
    c.profile.every = kMicrosPerHour;
    c.profile.gaps = GapPolicy::kZero;
    c.profile.lateness = 5 * kMicrosPerMinute;
    c.profile.level_noise_auto = true;
    c.profile.detectors = {DetectorKind::kCusum, DetectorKind::kBocpd};
    c.stream.level = 5.0;
    cases.push_back(c);
  }
  {
    Case c{"meter_without_seasons", {}, {}};
    c.profile.kind = SeriesKind::kMeter;
    c.profile.seasons = {};
    c.stream.daily_amplitude = c.stream.weekly_amplitude = 0.0;
    c.stream.level = 50.0;
    cases.push_back(c);
  }
  return cases;
}

// Meter cases read a growing total.
std::vector<synthetic::SyntheticReading> Stream(const Case& c, long long count) {
  auto readings = synthetic::MakeSyntheticStream(c.stream, count, /*seed=*/11);
  if (c.profile.kind == SeriesKind::kMeter) {
    double total = 0.0;
    for (auto& r : readings) r.value = (total += std::max(0.0, r.value));
  } else if (c.profile.kind == SeriesKind::kCount) {
    for (auto& r : readings) r.value = std::max(0.0, std::round(r.value));
  }
  return readings;
}

std::string Describe(const std::vector<SeriesEvent>& events) {
  std::string out;
  for (const SeriesEvent& e : events) {
    out += std::string(ToString(e.type)) + " " + std::string(ToString(e.kind)) + " " +
           std::to_string(e.detected_at) + " " + std::to_string(e.change_at) + " " +
           std::to_string(e.magnitude) + "\n";
  }
  return out;
}

std::string Saved(const SeriesMonitor& monitor) {
  SnapshotWriter w;
  monitor.Save(w);
  return w.Take();
}

TEST(SeriesMonitorCheckpointTest, RestoredMonitorContinuesExactlyAsTheOriginal) {
  constexpr long long kReadings = 1600;
  for (const Case& c : Cases()) {
    SCOPED_TRACE(c.name);
    auto design = ProfileDesign::Make(c.profile);
    ASSERT_TRUE(design.ok()) << design.status().ToString();
    const auto readings = Stream(c, kReadings);
    // A stream that stops holds fewer readings than asked for.
    const long long n = static_cast<long long>(readings.size());
    // Saved before the forecaster starts, during warmup, armed, after alerts.
    for (long long cut : {3LL, 30LL, 400LL, 1000LL, 1450LL}) {
      if (cut >= n) continue;
      SCOPED_TRACE(cut);
      SeriesMonitor original(&*design);
      std::vector<SeriesEvent> ignored;
      for (long long i = 0; i < cut; ++i)
        original.Observe(readings[i].time, readings[i].value, &ignored);
      SeriesMonitor restored(&*design);
      const std::string bytes = Saved(original);
      SnapshotReader reader(bytes);
      ASSERT_TRUE(restored.Load(reader).ok()) << reader.status().ToString();
      EXPECT_TRUE(reader.AtEnd());
      EXPECT_EQ(Saved(restored), bytes);
      std::vector<SeriesEvent> a, b;
      for (long long i = cut; i < n; ++i) {
        original.Observe(readings[i].time, readings[i].value, &a);
        restored.Observe(readings[i].time, readings[i].value, &b);
      }
      const EventTime end = readings.back().time + 2 * kMicrosPerDay;
      original.AdvanceClock(end, &a);
      restored.AdvanceClock(end, &b);
      original.Flush(&a);
      restored.Flush(&b);
      EXPECT_EQ(Describe(a), Describe(b));
      EXPECT_EQ(Saved(original), Saved(restored));
    }
  }
}

TEST(SeriesMonitorCheckpointTest, TruncatedStateIsRefusedAtEveryLength) {
  ProfileOptions profile;
  profile.detectors = {DetectorKind::kCusum, DetectorKind::kBocpd};
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok());
  SeriesMonitor original(&*design);
  synthetic::SyntheticStreamOptions stream;
  std::vector<SeriesEvent> ignored;
  for (const auto& r : synthetic::MakeSyntheticStream(stream, 300, 5))
    original.Observe(r.time, r.value, &ignored);
  const std::string bytes = Saved(original);
  for (std::size_t length = 0; length < bytes.size(); length += 1 + length / 7) {
    SeriesMonitor restored(&*design);
    SnapshotReader reader(std::string_view(bytes).substr(0, length));
    EXPECT_FALSE(restored.Load(reader).ok()) << length;
  }
}

// Whether the model has settled is kept (since "SMN2"): a monitor saved while
// its model is still unsettled comes back unarmed. States of the formats
// before still load: "SMN4", without the refit hold ("SMN5" adds it at the
// end); "SMN3", without the level detectors' recent inputs ("SMN4" adds them
// at the end); "SMN2", with a ring of the last 256 observation times where
// "SMN3" keeps each pending level firing's length; and "SMON", without the
// flag, which counts as settled.
TEST(SeriesMonitorCheckpointTest, SettledFlagIsKeptAndOlderStatesCountAsSettled) {
  ProfileOptions profile;
  profile.seasons = {kMicrosPerDay};
  profile.warmup = 20;
  // One level detector: its firing record is the last before the held readings.
  profile.detectors = {DetectorKind::kCusum};
  auto design = ProfileDesign::Make(profile);
  ASSERT_TRUE(design.ok());
  // Readings 10 minutes apart: 30 of them (5 hours) are past warmup but far
  // from a day, so the daily terms are not known yet.
  SeriesMonitor early(&*design);
  std::vector<SeriesEvent> ignored;
  const auto readings = synthetic::MakeSyntheticStream({}, 30, 5);
  for (const auto& r : readings) early.Observe(r.time, r.value, &ignored);
  ASSERT_GT(early.observations(), profile.warmup);
  ASSERT_FALSE(early.armed());
  std::string bytes = Saved(early);
  // Whether the state loads whole, and whether the restored monitor is armed.
  const auto restore = [&](const std::string& state) -> std::optional<bool> {
    SeriesMonitor restored(&*design);
    SnapshotReader reader(state);
    if (!restored.Load(reader).ok() || !reader.AtEnd()) return std::nullopt;
    return restored.armed();
  };
  EXPECT_EQ(restore(bytes), false);
  ASSERT_EQ(bytes.substr(0, 4), "SMN5");
  // As "SMN4": without the refit hold at the end.
  bytes.resize(bytes.size() - 8);
  bytes.replace(0, 4, "SMN4");
  EXPECT_EQ(restore(bytes), false);
  // As "SMN3": without the recent inputs at the end.
  bytes.resize(bytes.size() - (8 + 16 * 8 + 16 * 8));
  bytes.replace(0, 4, "SMN3");
  EXPECT_EQ(restore(bytes), false);
  // As "SMN2": without the firing's length (8 bytes before its threshold
  // fraction, the empty list of held readings and the two reorder times
  // before the intake, "INTK"), with the ring of times before the regime's
  // observations (26 bytes before "HLTH").
  const std::size_t intake = bytes.find("INTK");
  ASSERT_NE(intake, std::string::npos);
  bytes.erase(intake - 40, 8);
  const std::size_t ring_end = bytes.rfind("HLTH") - 26;
  bytes.insert(ring_end, std::string(256 * 8, '\0'));
  bytes.replace(0, 4, "SMN2");
  EXPECT_EQ(restore(bytes), false);
  bytes.replace(0, 4, "SMON");
  bytes.pop_back();  // the flag
  EXPECT_EQ(restore(bytes), true);
}

TEST(SeriesMonitorCheckpointTest, StateOfAnotherDesignIsRefused) {
  ProfileOptions saved_profile;
  saved_profile.detectors = {DetectorKind::kCusum, DetectorKind::kPageHinkley};
  ProfileOptions other = saved_profile;
  other.seasons = {kMicrosPerDay};  // fewer coefficients
  auto saved_design = ProfileDesign::Make(saved_profile);
  auto other_design = ProfileDesign::Make(other);
  ASSERT_TRUE(saved_design.ok() && other_design.ok());
  SeriesMonitor original(&*saved_design);
  std::vector<SeriesEvent> ignored;
  for (const auto& r : synthetic::MakeSyntheticStream({}, 200, 5))
    original.Observe(r.time, r.value, &ignored);
  const std::string bytes = Saved(original);
  SeriesMonitor restored(&*other_design);
  SnapshotReader reader(bytes);
  const Status status = restored.Load(reader);
  EXPECT_EQ(status.code(), Status::Code::kCorruption) << status.ToString();
}

}  // namespace
}  // namespace plumbline
