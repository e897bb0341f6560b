#include "detectors/bocpd.h"

#include <math.h>  // lgamma_r: std::lgamma may write the global signgam

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <limits>
#include <numbers>
#include <string>

#if defined(__x86_64__) && defined(__GNUC__)
#define PLUMBLINE_BOCPD_X86 1
#include <immintrin.h>
#endif

namespace plumbline {

bool BocpdOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why != nullptr) *why = message;
    return false;
  };
  if (!(std::isfinite(mu0) && std::abs(mu0) <= kBocpdMaxAbsReading)) {
    return fail("mu0 must be finite with |mu0| <= 1e100");
  }
  if (!(kappa0 > 0.0 && kappa0 <= 1e9)) return fail("kappa0 must be in (0, 1e9]");
  if (!(alpha0 > 0.0 && alpha0 <= 1e9)) return fail("alpha0 must be in (0, 1e9]");
  if (!(beta0 >= 1e-300 && beta0 <= 1e300))
    return fail("beta0 must be in [1e-300, 1e300]");
  if (!(hazard > 0.0 && hazard <= 0.5)) return fail("hazard must be in (0, 0.5]");
  if (!(max_run_length >= 2 && max_run_length <= 1000000)) {
    return fail("max_run_length must be in [2, 1000000]");
  }
  if (!(prune_tolerance >= 0.0 && prune_tolerance <= 1e-3)) {
    return fail("prune_tolerance must be in [0, 1e-3] (0 disables pruning)");
  }
  if (!(window >= 1 && window < max_run_length)) {
    return fail("window must be in [1, max_run_length - 1]");
  }
  if (!(threshold > 0.0 && threshold < 1.0 - hazard)) {
    return fail("threshold must be in (0, 1 - hazard)");
  }
  if (!(min_readings > window)) return fail("min_readings must be > window");
  if (!(arl0 == 0.0 || (arl0 >= 1.0 && std::isfinite(arl0)))) {
    return fail("arl0 must be 0 (not calibrated) or finite and >= 1");
  }
  return true;
}

// ---------------------------------------------------------------------------
// The update loop, vectorised.
//
// Per state it is one logarithm (of the updated beta) and one exponential (of
// the state's log joint mass less the largest), with a few multiply-adds
// around them; everything else in an update is per reading, not per state.
// The loop is written once, over an instruction-set policy, with the
// GCC/Clang vector extension, and compiled three times:
//   Portable  2 lanes: SSE2 on any x86-64, NEON on ARM, plain code elsewhere;
//             products and sums rounded separately.
//   Avx2      4 lanes, x86-64 with AVX2 and FMA: fused multiply-add.
//   Avx512    8 lanes, x86-64 with AVX-512F: the same fused operations.
// The widest one the processor supports is chosen when a posterior is built.
// Avx2 and Avx512 perform the same IEEE operations lane by lane, keep the sum
// of the weights as eight partial sums by slot modulo 8 added in a fixed
// order, and find the maximum by exact comparison, so they give bit-identical
// results. Portable rounds each product (and so reduces the logarithm's
// argument differently); it agrees with them to a few units in the last place
// of each exp and log, not bit for bit. exp and log are our own (below)
// because the library's are scalar.
//
// An update is two passes over the states: ScoreStates (statistics, then u_j
// and their maximum) and WeighStates (w_j = exp(u_j - max), in place of the
// u_j). Two passes rather than one because the second needs the maximum and
// because their long chains of dependent operations overlap better apart.
// The passes run on whole, aligned blocks of 8 lanes (see UpdateArrays) and
// in opposite directions, alternating with each reading, so that each starts
// where the previous one ended, on data still in the L1 cache.

// Every vector-valued helper below is inlined into a function compiled for
// the instruction set of its vectors, so the ABI notes GCC gives for 32- and
// 64-byte vectors passed between functions of different targets do not apply.
// (GCC reports them at the end of the file, hence no pop.)
#pragma GCC diagnostic ignored "-Wpsabi"

namespace {

typedef double Lanes2 __attribute__((vector_size(16)));
typedef std::uint64_t Bits2 __attribute__((vector_size(16)));
typedef std::int64_t Mask2 __attribute__((vector_size(16)));
typedef double Lanes4 __attribute__((vector_size(32)));
typedef std::uint64_t Bits4 __attribute__((vector_size(32)));
typedef double Lanes8 __attribute__((vector_size(64)));
typedef std::uint64_t Bits8 __attribute__((vector_size(64)));

constexpr std::size_t kBlock = 8;  // lanes per block: the partial sums of WeighStates

#define PLUMBLINE_INLINE inline __attribute__((always_inline))

template <class V>
PLUMBLINE_INLINE void Load(const double* p, V& v) {
  std::memcpy(&v, p, sizeof v);
}
template <class V>
PLUMBLINE_INLINE void Store(double* p, const V& v) {
  std::memcpy(p, &v, sizeof v);
}
template <class V>
PLUMBLINE_INLINE V Broadcast(double x) {
  V v;
  for (std::size_t lane = 0; lane < sizeof(V) / sizeof(double); ++lane) v[lane] = x;
  return v;
}

// Tables, each value the nearest double to the exact one (computed with 200-bit
// mpmath). 2^(j/16), j = 0..15:
constexpr double kExp2Sixteenths[16] = {
    0x1.0000000000000p+0, 0x1.0b5586cf9890fp+0, 0x1.172b83c7d517bp+0,
    0x1.2387a6e756238p+0, 0x1.306fe0a31b715p+0, 0x1.3dea64c123422p+0,
    0x1.4bfdad5362a27p+0, 0x1.5ab07dd485429p+0, 0x1.6a09e667f3bcdp+0,
    0x1.7a11473eb0187p+0, 0x1.8ace5422aa0dbp+0, 0x1.9c49182a3f090p+0,
    0x1.ae89f995ad3adp+0, 0x1.c199bdd85529cp+0, 0x1.d5818dcfba487p+0,
    0x1.ea4afa2a490dap+0};
// The same with j << 48 taken off their bits, so that adding k << 48 (k =
// 16 q + j) adds q to the exponent and restores the mantissa (VectorExp).
struct ExpTable {
  alignas(64) double value[16];
};
constexpr ExpTable kExpScaleTable = [] {
  ExpTable table{};
  for (std::uint64_t j = 0; j < 16; ++j) {
    table.value[j] = std::bit_cast<double>(
        std::bit_cast<std::uint64_t>(kExp2Sixteenths[j]) - (j << 48));
  }
  return table;
}();
// clang-format off
// For the centres c = J/16, J = 12..24, stored at J mod 16 (9..11 unused):
// 1/c, log c, and -log(1/c) of the rounded 1/c (so that log z = log1p(z inv_c
// - 1) - log(inv_c) holds exactly for the rounded inv_c).
alignas(64) constexpr double kInverseCentre[16] = {
    0x1.0000000000000p+0, 0x1.e1e1e1e1e1e1ep-1, 0x1.c71c71c71c71cp-1, 0x1.af286bca1af28p-1,
    0x1.999999999999ap-1, 0x1.8618618618618p-1, 0x1.745d1745d1746p-1, 0x1.642c8590b2164p-1,
    0x1.5555555555555p-1, 0.0, 0.0, 0.0,
    0x1.5555555555555p+0, 0x1.3b13b13b13b14p+0, 0x1.2492492492492p+0, 0x1.1111111111111p+0};
alignas(64) constexpr double kLogCentre[16] = {
    0.0, 0x1.f0a30c01162a6p-5, 0x1.e27076e2af2e6p-4, 0x1.5ff3070a793d4p-3,
    0x1.c8ff7c79a9a22p-3, 0x1.1675cababa60ep-2, 0x1.4618bc21c5ec2p-2, 0x1.739d7f6bbd007p-2,
    0x1.9f323ecbf984cp-2, 0.0, 0.0, 0.0,
    -0x1.269621134db92p-2, -0x1.a93ed3c8ad9e3p-3, -0x1.1178e8227e47cp-3, -0x1.08598b59e3a07p-4};
alignas(64) constexpr double kMinusLogInverseCentre[16] = {
    0.0, 0x1.f0a30c01162a8p-5, 0x1.e27076e2af2eap-4, 0x1.5ff3070a793d6p-3,
    0x1.c8ff7c79a9a20p-3, 0x1.1675cababa60fp-2, 0x1.4618bc21c5ec2p-2, 0x1.739d7f6bbd007p-2,
    0x1.9f323ecbf984dp-2, 0.0, 0.0, 0.0,
    -0x1.269621134db91p-2, -0x1.a93ed3c8ad9e5p-3, -0x1.1178e8227e47ap-3, -0x1.08598b59e3a06p-4};
// clang-format on

// ---- Instruction-set policies. Each has the vector type V and:
//   MulAdd(a, b, c)  a b + c (fused where kFused)
//   Max, Min         lane-wise, for operands that are not NaN
//   Lookup(t, key)   t[low 4 bits of each lane of key] for a 16-entry table
//   Split(y, e, z)   y = 2^e z with z in [0.75, 1.5), y positive and normal
//   Scale(t, kd, p, x)  t' p where t' has the bits of t plus k << 48 (kd
//                    holds k in its low bits, see VectorExp), and 0 in
//                    lanes where x < -708
//   EqualMask(a, b)  bit l set when lane l of a equals lane l of b

// Bit-level forms shared by Portable and Avx2 (exact, so Avx512's
// instructions for the same results agree with them).
template <class V, class Bits>
PLUMBLINE_INLINE void SplitBits(const V& y, V& e, V& z) {
  // glibc's reduction: subtracting the bits of 0.75 leaves the exponent of
  // y / 0.75 in the top bits; z = y 2^-e then lies in [0.75, 1.5).
  const Bits bits = (Bits)y;
  const Bits offset = bits - 0x3FE8000000000000ULL;
  // e as a double via the 2^52 trick (no 64-bit integer conversion in SSE2).
  e = (V)(((offset + 0x4000000000000000ULL) >> 52) | 0x4330000000000000ULL) -
      (0x1p52 + 1024.0);
  z = (V)(bits - (offset & 0xFFF0000000000000ULL));
}
template <class V, class Bits>
PLUMBLINE_INLINE V ScaleBits(const V& t, const V& kd, const V& p, const V& x) {
  const V scaled_t = (V)((Bits)t + ((Bits)kd << 48));
  return (V)((Bits)(scaled_t * p) & ~(Bits)(x < -708.0));
}

struct Portable {
  using V = Lanes2;
  using Bits = Bits2;
  static constexpr bool kFused = false;
  static PLUMBLINE_INLINE V MulAdd(const V& a, const V& b, const V& c) {
    const V product = a * b;
    return product + c;
  }
  static PLUMBLINE_INLINE V Max(const V& a, const V& b) {
    const Mask2 a_larger = a > b;
    return (V)(((Bits)a & (Bits)a_larger) | ((Bits)b & ~(Bits)a_larger));
  }
  static PLUMBLINE_INLINE V Min(const V& a, const V& b) {
    const Mask2 a_smaller = a < b;
    return (V)(((Bits)a & (Bits)a_smaller) | ((Bits)b & ~(Bits)a_smaller));
  }
  static PLUMBLINE_INLINE V Lookup(const double* table, const V& key) {
    const Bits k = (Bits)key & 15;
    return V{table[k[0]], table[k[1]]};
  }
  static PLUMBLINE_INLINE void Split(const V& y, V& e, V& z) {
    SplitBits<V, Bits>(y, e, z);
  }
  static PLUMBLINE_INLINE V Scale(const V& t, const V& kd, const V& p, const V& x) {
    return ScaleBits<V, Bits>(t, kd, p, x);
  }
  static PLUMBLINE_INLINE unsigned EqualMask(const V& a, const V& b) {
    return (a[0] == b[0] ? 1u : 0u) | (a[1] == b[1] ? 2u : 0u);
  }
};

#ifdef PLUMBLINE_BOCPD_X86
#define PLUMBLINE_AVX2 __attribute__((target("avx2,fma")))
#define PLUMBLINE_AVX512 __attribute__((target("avx512f")))

struct Avx2 {
  using V = Lanes4;
  using Bits = Bits4;
  static constexpr bool kFused = true;
  static PLUMBLINE_AVX2 inline V MulAdd(const V& a, const V& b, const V& c) {
    return (V)_mm256_fmadd_pd((__m256d)a, (__m256d)b, (__m256d)c);
  }
  static PLUMBLINE_AVX2 inline V Max(const V& a, const V& b) {
    return (V)_mm256_max_pd((__m256d)a, (__m256d)b);
  }
  static PLUMBLINE_AVX2 inline V Min(const V& a, const V& b) {
    return (V)_mm256_min_pd((__m256d)a, (__m256d)b);
  }
  static PLUMBLINE_AVX2 inline V Lookup(const double* table, const V& key) {
    return (V)_mm256_i64gather_pd(table, (__m256i)((Bits)key & 15), 8);
  }
  static PLUMBLINE_AVX2 inline void Split(const V& y, V& e, V& z) {
    SplitBits<V, Bits>(y, e, z);
  }
  static PLUMBLINE_AVX2 inline V Scale(const V& t, const V& kd, const V& p, const V& x) {
    return ScaleBits<V, Bits>(t, kd, p, x);
  }
  static PLUMBLINE_AVX2 inline unsigned EqualMask(const V& a, const V& b) {
    return static_cast<unsigned>(
        _mm256_movemask_pd(_mm256_cmp_pd((__m256d)a, (__m256d)b, _CMP_EQ_OQ)));
  }
};

struct Avx512 {
  using V = Lanes8;
  using Bits = Bits8;
  static constexpr bool kFused = true;
  static PLUMBLINE_AVX512 inline V MulAdd(const V& a, const V& b, const V& c) {
    return (V)_mm512_fmadd_pd((__m512d)a, (__m512d)b, (__m512d)c);
  }
  static PLUMBLINE_AVX512 inline V Max(const V& a, const V& b) {
    return (V)_mm512_mask_max_pd((__m512d)b, 0xFF, (__m512d)a, (__m512d)b);
  }
  static PLUMBLINE_AVX512 inline V Min(const V& a, const V& b) {
    return (V)_mm512_mask_min_pd((__m512d)b, 0xFF, (__m512d)a, (__m512d)b);
  }
  static PLUMBLINE_AVX512 inline V Lookup(const double* table, const V& key) {
    return (V)_mm512_permutex2var_pd(_mm512_load_pd(table), (__m512i)key,
                                     _mm512_load_pd(table + 8));
  }
  static PLUMBLINE_AVX512 inline void Split(const V& y, V& e, V& z) {
    // The same e and z as SplitBits, by the instructions made for it: z
    // directly, e as the exponent of y / 0.75, taken from y times the double
    // nearest 4/3 (checked against SplitBits at every binade and for every y
    // within 3000 ulps of the ends of the interval; y must be below 1.3e308).
    z = (V)_mm512_mask_getmant_pd((__m512d)y, 0xFF, (__m512d)y, _MM_MANT_NORM_p75_1p5,
                                  _MM_MANT_SIGN_src);
    const __m512d scaled = _mm512_mul_pd((__m512d)y, _mm512_set1_pd(4.0 / 3.0));
    e = (V)_mm512_mask_getexp_pd(scaled, 0xFF, scaled);
  }
  static PLUMBLINE_AVX512 inline V Scale(const V& t, const V& kd, const V& p,
                                         const V& x) {
    const V scaled_t = (V)((Bits)t + ((Bits)kd << 48));
    const __mmask8 kept =
        _mm512_cmp_pd_mask((__m512d)x, _mm512_set1_pd(-708.0), _CMP_GE_OQ);
    return (V)_mm512_maskz_mul_pd(kept, (__m512d)scaled_t, (__m512d)p);
  }
  static PLUMBLINE_AVX512 inline unsigned EqualMask(const V& a, const V& b) {
    return _mm512_cmp_pd_mask((__m512d)a, (__m512d)b, _CMP_EQ_OQ);
  }
};
#endif  // PLUMBLINE_BOCPD_X86

// ln 2 split so that k * hi is exact for |k| < 2^20 (Cody and Waite).
constexpr double kLn2 = 0x1.62e42fefa39efp-1;
constexpr double kLn2Hi = 0x1.62e42feep-1;
constexpr double kLn2Lo = 0x1.a39ef35793c76p-33;

// e^x for x <= 0, 0 below -708. x = k ln2/16 + r with |r| <= ln2/32 (k by the
// round-to-nearest shifter trick, which leaves k in the low bits of kd); e^x =
// 2^floor(k/16) 2^((k mod 16)/16) e^r, the middle factor from a 16-entry
// table, e^r = 1 + r g(r) with g the degree-5 polynomial below (a Chebyshev
// fit of (e^r - 1)/r on |r| <= ln2/32 by 200-bit mpmath; relative error of
// 1 + r g(r) < 1.4e-17) in Estrin's scheme. Error within 2 ulps (measured
// against libm).
template <class I>
PLUMBLINE_INLINE typename I::V VectorExp(const typename I::V& x) {
  using V = typename I::V;
  constexpr double kShifter = 0x1.8p52;
  const V kd = I::MulAdd(x, Broadcast<V>(16.0 / kLn2), Broadcast<V>(kShifter));
  const V k = kd - kShifter;
  const V hi = I::MulAdd(k, Broadcast<V>(-kLn2Hi / 16), x);  // exact
  const V r = I::MulAdd(k, Broadcast<V>(-kLn2Lo / 16), hi);
  const V r2 = r * r;
  const V g01 = I::MulAdd(r, Broadcast<V>(0x1.0000000000001p-1),
                          Broadcast<V>(0x1.0000000000003p+0));
  const V g23 = I::MulAdd(r, Broadcast<V>(0x1.55555554e9468p-5),
                          Broadcast<V>(0x1.555555547d378p-3));
  const V g45 = I::MulAdd(r, Broadcast<V>(0x1.6c17ed4cc4834p-10),
                          Broadcast<V>(0x1.11123cf1dba3ap-7));
  const V g = I::MulAdd(r2, I::MulAdd(r2, g45, g23), g01);
  const V p = I::MulAdd(r, g, Broadcast<V>(1.0));
  return I::Scale(I::Lookup(kExpScaleTable.value, kd), kd, p, x);
}

// log y for positive normal y. y = 2^e z with z in [0.75, 1.5); c = z rounded
// to a multiple of 1/16 (by the shifter trick, which leaves 16 c in the low
// bits of key), so |z/c - 1| <= 1/24, and log y = e ln2 + log c + log1p(r),
// r = z/c - 1, log1p by its Taylor series to degree 11 (truncation error <
// 3e-18 relative) in Estrin's scheme. For c = 1 the result is r + O(r^2), so
// it stays accurate relative to log y near y = 1. Fused: r = z inv_c - 1 in
// one rounding, and log c taken as -log(inv_c). Unfused: r = (z - c) inv_c
// (z - c is exact) and log c from its table. Error within 2 ulps fused, 3
// unfused (measured against libm).
// As two parts, log y = log_c + log1p_r (the update loop multiplies each by
// alpha apart, which keeps the polynomial off the critical path's last step).
template <class I>
PLUMBLINE_INLINE void VectorLogParts(const typename I::V& y, typename I::V& log_c,
                                     typename I::V& log1p_r) {
  using V = typename I::V;
  V e, z;
  I::Split(y, e, z);
  constexpr double kShifter = 0x1.8p48;  // its ulp is 1/16
  const V key = z + kShifter;
  V r;
  if constexpr (I::kFused) {
    r = I::MulAdd(z, I::Lookup(kInverseCentre, key), Broadcast<V>(-1.0));
    log_c = I::MulAdd(e, Broadcast<V>(kLn2), I::Lookup(kMinusLogInverseCentre, key));
  } else {
    const V c = key - kShifter;
    r = (z - c) * I::Lookup(kInverseCentre, key);
    log_c = e * kLn2Hi + (I::Lookup(kLogCentre, key) + e * kLn2Lo);
  }
  const V r2 = r * r, r4 = r2 * r2;
  const V q23 = I::MulAdd(r, Broadcast<V>(1.0 / 3), Broadcast<V>(-1.0 / 2));
  const V q45 = I::MulAdd(r, Broadcast<V>(1.0 / 5), Broadcast<V>(-1.0 / 4));
  const V q67 = I::MulAdd(r, Broadcast<V>(1.0 / 7), Broadcast<V>(-1.0 / 6));
  const V q89 = I::MulAdd(r, Broadcast<V>(1.0 / 9), Broadcast<V>(-1.0 / 8));
  const V q1011 = I::MulAdd(r, Broadcast<V>(1.0 / 11), Broadcast<V>(-1.0 / 10));
  // log1p(r) = r + r^2 (q23 + r^2 q45 + r^4 (q67 + r^2 q89 + r^4 q1011))
  const V q = I::MulAdd(r4, I::MulAdd(r4, q1011, I::MulAdd(r2, q89, q67)),
                        I::MulAdd(r2, q45, q23));
  log1p_r = I::MulAdd(r2, q, r);
}

template <class I>
PLUMBLINE_INLINE typename I::V VectorLog(const typename I::V& y) {
  typename I::V log_c, log1p_r;
  VectorLogParts<I>(y, log_c, log1p_r);
  return log_c + log1p_r;
}

// The arrays of one update, as `lanes` lanes (a multiple of 8) that start at
// a slot that is a multiple of 8, so that every vector load and store is
// aligned: lane `first` + i is the state at position i = 0..n-1 (oldest
// first). The lanes outside hold a harmless dummy state (mu 0, beta 1, g =
// -infinity, so u = -infinity and weight 0), which the caller writes into
// the free slots around the states and whose results are ignored.
struct UpdateArrays {
  double* mu;                      // per state, advanced in place
  double* beta;                    // per state, advanced in place
  const double* log_mass;          // g_j
  const double* step;              // 1 / (kappa_n + 1), n = readings held
  const double* half_ratio;        // kappa_n / (2 (kappa_n + 1))
  const double* log_ml_next;       // L_{n+1}
  const double* minus_alpha_next;  // -alpha_{n+1}
  double* log_joint;               // out: u_j (ScoreStates); in: WeighStates
  double* weight;                  // out: w_j (may be log_joint: weighed in place)
  std::size_t lanes;
  std::size_t first;
  std::size_t n;
  // Direction of ScoreStates (WeighStates runs the other way). Alternating it
  // from one update to the next starts each pass on the lanes the previous
  // pass touched last, still in the L1 cache when the states outgrow it.
  bool score_backward;
};

// W lanes of ScoreStates from lane i; raises `top` to their largest u. (The
// per-run-length constants come from tables, so that a lane costs no more
// arithmetic than its logarithm and its update.)
template <class I>
PLUMBLINE_INLINE void ScoreLanes(const typename I::V& x, const UpdateArrays& a,
                                 std::size_t i, typename I::V& top) {
  using V = typename I::V;
  V mu, beta, log_mass, step, half_ratio, log_ml_next, minus_alpha_next;
  Load(a.mu + i, mu);
  Load(a.beta + i, beta);
  Load(a.log_mass + i, log_mass);
  Load(a.step + i, step);
  Load(a.half_ratio + i, half_ratio);
  Load(a.log_ml_next + i, log_ml_next);
  Load(a.minus_alpha_next + i, minus_alpha_next);
  const V d = x - mu;
  const V next_beta = I::MulAdd(half_ratio, d * d, beta);
  Store(a.mu + i, I::MulAdd(d, step, mu));
  Store(a.beta + i, next_beta);
  V log_c, log1p_r;
  VectorLogParts<I>(next_beta, log_c, log1p_r);
  const V u = I::MulAdd(minus_alpha_next, log1p_r,
                        I::MulAdd(minus_alpha_next, log_c, log_mass + log_ml_next));
  Store(a.log_joint + i, u);
  top = I::Max(u, top);
}

// Advances every state's statistics by x, writes u_j = g_j + L_{n+1} -
// alpha_{n+1} log beta'_j, and returns the largest u_j.
template <class I>
PLUMBLINE_INLINE double ScoreStates(double x, const UpdateArrays& arrays) {
  using V = typename I::V;
  constexpr std::size_t kWidth = sizeof(V) / sizeof(double);
  const UpdateArrays a = arrays;  // a local copy, which the stores cannot alias
  const V xs = Broadcast<V>(x);
  V top = Broadcast<V>(-std::numeric_limits<double>::infinity());
  if (a.score_backward) {
    for (std::size_t i = a.lanes; i > 0;) {
      i -= kWidth;
      ScoreLanes<I>(xs, a, i, top);
    }
  } else {
    for (std::size_t i = 0; i < a.lanes; i += kWidth) ScoreLanes<I>(xs, a, i, top);
  }
  double best = top[0];
  for (std::size_t lane = 1; lane < kWidth; ++lane) best = std::max(best, top[lane]);
  return best;
}

struct WeighResult {
  double sum = 0.0;        // of the weights
  double least = 0.0;      // smallest weight of a state
  std::size_t argmax = 0;  // last position with u = top (weight 1)
  double log_sum = 0.0;    // log(sum)
  double log_merge = 0.0;  // log((w_0 + w_1) / w_1), for a merge at the cap
};

// W lanes of WeighStates from lane `at`. (A function, not a lambda: a lambda
// would not be compiled for the instruction set of I.)
template <class I>
PLUMBLINE_INLINE void WeighLanes(const double* log_joint, double* weight, std::size_t at,
                                 const typename I::V& tops, bool all_states, bool forward,
                                 typename I::V& sum, typename I::V& least,
                                 std::size_t& top_at, unsigned& top_lanes) {
  using V = typename I::V;
  V u;
  Load(log_joint + at, u);
  const unsigned equal = I::EqualMask(u, tops);
  if (equal != 0 && (forward || top_lanes == 0)) {  // keep the last position
    top_at = at;
    top_lanes = equal;
  }
  const V w = VectorExp<I>(u - tops);
  Store(weight + at, w);
  sum += w;
  if (all_states) least = I::Min(w, least);
}

// weight_j = exp(u_j - top); their sum (eight partial sums by slot modulo 8,
// each taken in the pass's order of slots, added in a fixed order), the
// smallest, and the last j with u_j = top.
template <class I>
PLUMBLINE_INLINE WeighResult WeighStates(const UpdateArrays& arrays, double top) {
  using V = typename I::V;
  const UpdateArrays a = arrays;  // a local copy, which the stores cannot alias
  constexpr std::size_t kWidth = sizeof(V) / sizeof(double);
  constexpr std::size_t kParts = kBlock / kWidth;
  const double* log_joint = a.log_joint;
  double* weight = a.weight;
  const V tops = Broadcast<V>(top);
  V sum[kParts] = {};
  V least = Broadcast<V>(std::numeric_limits<double>::infinity());
  std::size_t top_at = 0;                  // lane 0 of the last vector holding top
  unsigned top_lanes = 0;                  // its lanes that hold top
  const std::size_t last = a.first + a.n;  // lanes [first, last) hold states
  if (a.score_backward) {
    for (std::size_t i = 0; i < a.lanes; i += kBlock) {
      const bool all_states = i >= a.first && i + kBlock <= last;
      for (std::size_t part = 0; part < kParts; ++part) {
        WeighLanes<I>(log_joint, weight, i + part * kWidth, tops, all_states, true,
                      sum[part], least, top_at, top_lanes);
      }
    }
  } else {
    for (std::size_t i = a.lanes; i > 0;) {
      i -= kBlock;
      const bool all_states = i >= a.first && i + kBlock <= last;
      for (std::size_t part = kParts; part > 0;) {
        --part;
        WeighLanes<I>(log_joint, weight, i + part * kWidth, tops, all_states, false,
                      sum[part], least, top_at, top_lanes);
      }
    }
  }
  double lowest = least[0];
  for (std::size_t lane = 1; lane < kWidth; ++lane)
    lowest = std::min(lowest, least[lane]);
  // The first and last blocks may hold dummies (weight 0): their states alone.
  for (std::size_t lane = a.first; lane < std::min(last, kBlock); ++lane) {
    lowest = std::min(lowest, weight[lane]);
  }
  for (std::size_t lane = std::max(a.first, a.lanes - kBlock); lane < last; ++lane) {
    lowest = std::min(lowest, weight[lane]);
  }
  double partial[kBlock];
  std::memcpy(partial, sum, sizeof partial);
  WeighResult result;
  result.sum = ((partial[0] + partial[4]) + (partial[2] + partial[6])) +
               ((partial[1] + partial[5]) + (partial[3] + partial[7]));
  result.least = lowest;
  // (Some lane holds top: the states' u are finite, the dummies' -infinity.)
  result.argmax =
      top_lanes == 0
          ? 0
          : top_at + static_cast<std::size_t>(31 - __builtin_clz(top_lanes)) - a.first;
  // Both logarithms the caller needs, in one evaluation.
  V logs = Broadcast<V>(result.sum);
  if (a.n >= 2 && weight[a.first + 1] > 0.0) {
    logs[1] = (weight[a.first] + weight[a.first + 1]) / weight[a.first + 1];
  }
  logs = VectorLog<I>(logs);
  result.log_sum = logs[0];
  result.log_merge = logs[1];
  return result;
}

// What one update's loops report.
struct LoopResult {
  double top = 0.0;       // max u_j
  double u_oldest = 0.0;  // u of the states at positions 0 and 1 (for the cap)
  double u_second = 0.0;
  WeighResult weighed;
};

// Both loops of an update: ScoreStates, then WeighStates on its u.
template <class I>
PLUMBLINE_INLINE LoopResult UpdateStates(double x, const UpdateArrays& a) {
  LoopResult result;
  result.top = ScoreStates<I>(x, a);
  result.u_oldest = a.log_joint[a.first];
  result.u_second = a.n >= 2 ? a.log_joint[a.first + 1] : 0.0;
  result.weighed = WeighStates<I>(a, result.top);
  return result;
}

// One compiled copy of the loops (and of exp and log, for tests) per
// instruction set.
struct Kernels {
  LoopResult (*update)(double x, const UpdateArrays& a);
  double (*exp)(double x);
  double (*log)(double x);
};

#define PLUMBLINE_KERNELS(Isa, ATTRIBUTES)                             \
  ATTRIBUTES LoopResult Update##Isa(double x, const UpdateArrays& a) { \
    return UpdateStates<Isa>(x, a);                                    \
  }                                                                    \
  ATTRIBUTES double Exp##Isa(double x) {                               \
    return VectorExp<Isa>(Broadcast<Isa::V>(x))[0];                    \
  }                                                                    \
  ATTRIBUTES double Log##Isa(double x) {                               \
    return VectorLog<Isa>(Broadcast<Isa::V>(x))[0];                    \
  }                                                                    \
  constexpr Kernels k##Isa##Kernels = {Update##Isa, Exp##Isa, Log##Isa};

PLUMBLINE_KERNELS(Portable, __attribute__((flatten)))
#ifdef PLUMBLINE_BOCPD_X86
PLUMBLINE_KERNELS(Avx2, PLUMBLINE_AVX2 __attribute__((flatten)))
PLUMBLINE_KERNELS(Avx512, PLUMBLINE_AVX512 __attribute__((flatten)))
#endif
#undef PLUMBLINE_KERNELS

const Kernels& KernelsFor(bocpd_internal::Isa isa) {
  switch (isa) {
#ifdef PLUMBLINE_BOCPD_X86
    case bocpd_internal::Isa::kAvx512:
      return kAvx512Kernels;
    case bocpd_internal::Isa::kAvx2:
      return kAvx2Kernels;
#endif
    default:
      return kPortableKernels;
  }
}

// log(1 + e^d), without overflow for large d.
double LogOnePlusExp(double d) {
  return d > 0.0 ? d + std::log1p(std::exp(-d)) : std::log1p(std::exp(d));
}

#undef PLUMBLINE_INLINE

// log Gamma(a) for a > 0, thread-safe (lgamma_r does not touch signgam).
double LogGamma(double a) {
  int sign = 0;
  return ::lgamma_r(a, &sign);
}

}  // namespace

namespace bocpd_internal {

bool Supported(Isa isa) {
  switch (isa) {
    case Isa::kPortable:
      return true;
#ifdef PLUMBLINE_BOCPD_X86
    case Isa::kAvx2:
      __builtin_cpu_init();
      return __builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma");
    case Isa::kAvx512:
      __builtin_cpu_init();
      return __builtin_cpu_supports("avx512f");
#endif
    default:
      return false;
  }
}

Isa BestIsa() {
  if (Supported(Isa::kAvx512)) return Isa::kAvx512;
  if (Supported(Isa::kAvx2)) return Isa::kAvx2;
  return Isa::kPortable;
}

double FastExp(double x, Isa isa) { return KernelsFor(isa).exp(x); }
double FastLog(double x, Isa isa) { return KernelsFor(isa).log(x); }

}  // namespace bocpd_internal

// ---------------------------------------------------------------------------
// RunLengthPosterior

namespace {

// |s_t| beyond which the shared offset is folded into every g_j, so that the
// g_j (and the u_j computed from them) stay small numbers: one pass over the
// states every few hundred readings.
constexpr double kMaxLogShift = 1024.0;

// Lanes the update loop's blocks are aligned to (kBlock), and so the padding
// of the tables and slot buffers for its dummy lanes.
constexpr std::size_t kLanePad = kBlock;

}  // namespace

std::shared_ptr<const RunLengthTables> RunLengthTables::Make(
    const BocpdOptions& options) {
  auto t = std::make_shared<RunLengthTables>();
  t->kappa0 = options.kappa0;
  t->alpha0 = options.alpha0;
  t->cap = options.max_run_length;
  // kLanePad entries of a harmless dummy on either side, for the dummy lanes
  // of the update loop.
  const auto states = static_cast<std::size_t>(t->cap) + 1;
  t->step_by_age.assign(states + 2 * kLanePad, 0.5);
  t->half_ratio_by_age.assign(states + 2 * kLanePad, 0.25);
  t->log_ml_next_by_age.assign(states + 2 * kLanePad, 0.0);
  t->minus_alpha_next_by_age.assign(states + 2 * kLanePad, -1.0);
  // L_m = log Gamma(alpha_m) - log Gamma(alpha0) - (m/2) log(2 pi)
  //       - (1/2) log(kappa_m / kappa0)
  const double alpha0 = t->alpha0, kappa0 = t->kappa0;
  const double log_gamma_alpha0 = LogGamma(alpha0);
  auto log_ml = [&](double m) {
    return LogGamma(alpha0 + 0.5 * m) - log_gamma_alpha0 -
           0.5 * m * std::log(2.0 * std::numbers::pi) - 0.5 * std::log1p(m / kappa0);
  };
  for (std::size_t age = 0; age < states; ++age) {
    const double n = static_cast<double>(t->cap) - static_cast<double>(age);
    const double step = 1.0 / (kappa0 + n + 1.0);
    t->step_by_age[kLanePad + age] = step;
    t->half_ratio_by_age[kLanePad + age] = std::fma(step, -0.5, 0.5);  // exact product
    t->log_ml_next_by_age[kLanePad + age] = log_ml(n + 1.0);
    t->minus_alpha_next_by_age[kLanePad + age] = -(alpha0 + 0.5 * (n + 1.0));
  }
  return t;
}

bool RunLengthTables::Fits(const BocpdOptions& options) const {
  return kappa0 == options.kappa0 && alpha0 == options.alpha0 &&
         cap == options.max_run_length;
}

RunLengthPosterior::RunLengthPosterior(const BocpdOptions& options,
                                       std::shared_ptr<const RunLengthTables> tables)
    : RunLengthPosterior(options, bocpd_internal::BestIsa(), std::move(tables)) {}

RunLengthPosterior::RunLengthPosterior(const BocpdOptions& options,
                                       bocpd_internal::Isa isa,
                                       std::shared_ptr<const RunLengthTables> tables)
    : mu0_(options.mu0),
      kappa0_(options.kappa0),
      alpha0_(options.alpha0),
      beta0_(options.beta0),
      prior_log_mass_(options.alpha0 * std::log(options.beta0)),
      log_hazard_(std::log(options.hazard)),
      log_growth_(std::log1p(-options.hazard)),
      hazard_(options.hazard),
      tolerance_(options.prune_tolerance),
      cap_(options.max_run_length),
      isa_(bocpd_internal::Supported(isa) ? isa : bocpd_internal::Isa::kPortable),
      tables_(tables && tables->Fits(options) ? std::move(tables)
                                              : RunLengthTables::Make(options)) {
  const auto states = static_cast<std::size_t>(cap_) + 1;
  // Slot buffers: 2 (R + 1) + 1 slots, and kLanePad more for the dummy lanes
  // after the last state.
  slots_ = 2 * states + 1;
  for (auto* v : {&mu_, &beta_, &log_mass_, &weight_}) v->assign(slots_ + kLanePad, 0.0);
  // Scratch for the lanes of one update: at most R + 1 states and 2 kLanePad - 2
  // dummies.
  for (auto* v : {&gather_step_, &gather_half_ratio_, &gather_log_ml_next_,
                  &gather_minus_alpha_next_}) {
    v->assign(states + 2 * kLanePad, 0.0);
  }
  birth_.resize(slots_);
  recent_.resize(states);
  Reset();
}

void RunLengthPosterior::Reset() {
  begin_ = end_ = 0;
  readings_ = 0;
  recent_at_ = 0;
  log_evidence_ = 0.0;
  last_log_predictive_ = 0.0;
  map_slot_ = 0;
  scale_ = 1.0;
  log_shift_ = 0.0;
  AppendFreshState();
  weight_[begin_] = 1.0;                // P(r_0 = 0) = 1
  log_mass_[begin_] = prior_log_mass_;  // log 1 + alpha0 log beta0
}

void RunLengthPosterior::AppendFreshState() {
  if (end_ == slots_) {
    // Move the block back to slot 0 (happens about once every R updates).
    const std::size_t n = end_ - begin_;
    auto move_back = [&](auto& v) {
      std::copy(v.begin() + static_cast<std::ptrdiff_t>(begin_),
                v.begin() + static_cast<std::ptrdiff_t>(end_), v.begin());
    };
    move_back(mu_);
    move_back(beta_);
    move_back(log_mass_);
    move_back(weight_);
    move_back(birth_);
    map_slot_ -= begin_;
    begin_ = 0;
    end_ = n;
  }
  mu_[end_] = mu0_;
  beta_[end_] = beta0_;
  // log P = log H = g + L_0 - alpha0 log beta0 - s_t, with L_0 = 0.
  log_mass_[end_] = log_hazard_ + prior_log_mass_ + log_shift_;
  weight_[end_] = hazard_ / scale_;
  birth_[end_] = readings_;
  ++end_;
}

void RunLengthPosterior::Update(double x) {
  const std::size_t n = end_ - begin_;
  const std::size_t b = begin_;

  // Lanes of the update loop: slots [lane0, lane0 + lanes), aligned to 8, with
  // the dummy state in the slots around the states.
  const std::size_t first = b % kLanePad;
  const std::size_t lane0 = b - first;
  const std::size_t lanes = (first + n + kLanePad - 1) / kLanePad * kLanePad;
  auto put_dummy = [this](std::size_t slot) {
    mu_[slot] = 0.0;
    beta_[slot] = 1.0;
    log_mass_[slot] = -std::numeric_limits<double>::infinity();
  };
  for (std::size_t slot = lane0; slot < b; ++slot) put_dummy(slot);
  for (std::size_t slot = end_; slot < lane0 + lanes; ++slot) put_dummy(slot);
  UpdateArrays arrays;
  arrays.mu = &mu_[lane0];
  arrays.beta = &beta_[lane0];
  arrays.log_mass = &log_mass_[lane0];
  arrays.log_joint = &weight_[lane0];  // u, then the weights in its place
  arrays.weight = &weight_[lane0];
  arrays.lanes = lanes;
  arrays.first = first;
  arrays.n = n;
  arrays.score_backward = readings_ % 2 == 1;
  // Per-state constants: a slice of the tables when the held run lengths are
  // consecutive (no pruning gaps), else gathered.
  const std::int64_t oldest = readings_ - birth_[b];  // readings held by the oldest state
  if (oldest == static_cast<std::int64_t>(n) - 1) {
    // Lane l holds age R - oldest + l - first (dummies reach into the padding).
    const std::size_t start = kLanePad + static_cast<std::size_t>(cap_ - oldest) - first;
    arrays.step = &tables_->step_by_age[start];
    arrays.half_ratio = &tables_->half_ratio_by_age[start];
    arrays.log_ml_next = &tables_->log_ml_next_by_age[start];
    arrays.minus_alpha_next = &tables_->minus_alpha_next_by_age[start];
  } else {
    for (std::size_t slot = lane0; slot < lane0 + lanes; ++slot) {
      std::size_t age = 0;  // a dummy lane: any finite constants
      if (slot >= b && slot < end_) {
        age = kLanePad + static_cast<std::size_t>(cap_ - (readings_ - birth_[slot]));
      }
      const std::size_t lane = slot - lane0;
      gather_step_[lane] = tables_->step_by_age[age];
      gather_half_ratio_[lane] = tables_->half_ratio_by_age[age];
      gather_log_ml_next_[lane] = tables_->log_ml_next_by_age[age];
      gather_minus_alpha_next_[lane] = tables_->minus_alpha_next_by_age[age];
    }
    arrays.step = gather_step_.data();
    arrays.half_ratio = gather_half_ratio_.data();
    arrays.log_ml_next = gather_log_ml_next_.data();
    arrays.minus_alpha_next = gather_minus_alpha_next_.data();
  }

  // u_j = log P_{t-1}(j) + log pi_j(x) + s_{t-1}, and w_j = exp(u_j - max u).
  const LoopResult loops = KernelsFor(isa_).update(x, arrays);
  const double top = loops.top;
  const WeighResult& weighed = loops.weighed;
  const double log_sum = weighed.log_sum;  // sum >= 1: the top weighs 1
  last_log_predictive_ = (top - log_shift_) + log_sum;
  log_evidence_ += last_log_predictive_;

  // Growth: P(j + 1) = (1 - H) w_j / sum. (P(0) = H is appended below.)
  scale_ = (1.0 - hazard_) / weighed.sum;
  log_shift_ = (top + log_sum) - log_growth_;
  map_slot_ = b + weighed.argmax;

  ++readings_;
  recent_at_ = recent_at_ == static_cast<std::size_t>(cap_) ? 0 : recent_at_ + 1;
  recent_[recent_at_] = x;  // reading readings_ at readings_ mod (R + 1)

  // Cap: the oldest state has grown past R.
  if (readings_ - birth_[b] > cap_) {
    if (n >= 2 && readings_ - birth_[b + 1] == cap_) {
      // Both now hold the last R readings: merge (keep b + 1's statistics,
      // and raise its g by log(1 + P(b) / P(b + 1)), from the weights unless
      // they have underflowed, else from u).
      const double merged = weight_[b] + weight_[b + 1];
      log_mass_[b + 1] += weight_[b + 1] >= 1e-300
                              ? weighed.log_merge
                              : LogOnePlusExp(loops.u_oldest - loops.u_second);
      weight_[b + 1] = merged;
      if (map_slot_ == b || weight_[b + 1] > weight_[map_slot_]) map_slot_ = b + 1;
      ++begin_;
    } else {
      SlideCapState(b, loops.u_oldest);
    }
  }

  if (tolerance_ > 0.0 && weighed.least * scale_ < tolerance_) Prune();
  if (std::abs(log_shift_) > kMaxLogShift) {
    for (std::size_t i = begin_; i < end_; ++i) log_mass_[i] -= log_shift_;
    log_shift_ = 0.0;
  }
  AppendFreshState();
}

void RunLengthPosterior::SlideCapState(std::size_t slot, double log_joint) {
  // The state holds x_{t-R}..x_t; give back x_{t-R}, the reverse of the
  // conjugate update with kappa' = kappa0 + R + 1.
  // x_{t-R} sits at (t - R) mod (R + 1) = (t + 1) mod (R + 1).
  const double y =
      recent_[recent_at_ == static_cast<std::size_t>(cap_) ? 0 : recent_at_ + 1];
  const double kappa_full = kappa0_ + static_cast<double>(cap_) + 1.0;
  const double mu = (kappa_full * mu_[slot] - y) / (kappa_full - 1.0);
  const double d = y - mu;
  const double beta = beta_[slot] - (kappa_full - 1.0) * d * d / (2.0 * kappa_full);
  mu_[slot] = mu;
  beta_[slot] = std::max(beta, beta0_);  // beta >= beta0 exactly; guard rounding
  // Same probability (log P = log_joint - s_t), now from R readings:
  // g = log_joint - L_R + alpha_R log beta. (Age 1 holds the constants of R - 1
  // readings, whose "next" is R.)
  log_mass_[slot] =
      log_joint - tables_->log_ml_next_by_age[kLanePad + 1] -
      tables_->minus_alpha_next_by_age[kLanePad + 1] * std::log(beta_[slot]);
  ++birth_[slot];
}

void RunLengthPosterior::Prune() {
  // Drop states j >= 1 below the tolerance, keeping the most probable, and
  // rescale the rest to 1 - H.
  std::size_t write = begin_;
  double kept = 0.0;
  std::size_t map_slot = begin_;
  for (std::size_t read = begin_; read < end_; ++read) {
    const double p = weight_[read] * scale_;
    if (p < tolerance_ && read != map_slot_) continue;
    if (read == map_slot_) map_slot = write;
    mu_[write] = mu_[read];
    beta_[write] = beta_[read];
    log_mass_[write] = log_mass_[read];
    weight_[write] = weight_[read];
    birth_[write] = birth_[read];
    kept += p;
    ++write;
  }
  end_ = write;
  map_slot_ = map_slot;
  const double factor = (1.0 - hazard_) / kept;
  scale_ *= factor;
  log_shift_ -= std::log(factor);
}

int RunLengthPosterior::run_length(int i) const {
  return static_cast<int>(readings_ - birth_[Slot(i)]);
}

double RunLengthPosterior::probability(int i) const { return weight_[Slot(i)] * scale_; }

double RunLengthPosterior::mean(int i) const { return mu_[Slot(i)]; }

double RunLengthPosterior::variance(int i) const {
  const std::size_t slot = Slot(i);
  const double n = static_cast<double>(readings_ - birth_[slot]);
  return beta_[slot] / (alpha0_ + 0.5 * n);
}

double RunLengthPosterior::ProbabilityOf(int run_length) const {
  // Run lengths increase with i: binary search.
  int lo = 0, hi = size() - 1;
  while (lo <= hi) {
    const int mid = lo + (hi - lo) / 2;
    const int r = this->run_length(mid);
    if (r == run_length) return probability(mid);
    if (r < run_length) {
      lo = mid + 1;
    } else {
      hi = mid - 1;
    }
  }
  return 0.0;
}

double RunLengthPosterior::ProbabilityWithin(int w) const {
  // States 1, 2, ... sit in slots end_ - 2, end_ - 3, ...; run length <= w
  // means born at or after reading readings_ - w. Two running sums (every
  // other state) halve the chain of dependent additions.
  const std::int64_t born_after = readings_ - w;
  double even = 0.0, odd = 0.0;
  std::size_t slot = end_ - 1;
  while (slot > begin_ + 1 && birth_[slot - 2] >= born_after) {
    even += weight_[slot - 1];
    odd += weight_[slot - 2];
    slot -= 2;
  }
  if (slot > begin_ && birth_[slot - 1] >= born_after) even += weight_[slot - 1];
  return (even + odd) * scale_;
}

int RunLengthPosterior::MostProbableRunIndex() const {
  if (readings_ == 0) return -1;
  return static_cast<int>(end_ - 1 - map_slot_);
}

int RunLengthPosterior::MapRunLength() const {
  if (readings_ == 0 || weight_[map_slot_] * scale_ <= probability(0)) return 0;
  return MostProbableRunIndex() >= 0 ? run_length(MostProbableRunIndex()) : 0;
}

double RunLengthPosterior::MapProbability() const {
  if (readings_ == 0) return 1.0;
  return std::max(weight_[map_slot_] * scale_, probability(0));
}

double RunLengthPosterior::MeanRunLength() const {
  double total = 0.0;
  for (int i = 1; i < size(); ++i) total += run_length(i) * probability(i);
  return total;
}

int RunLengthPosterior::MedianRunLength() const {
  double cumulative = 0.0;
  for (int i = 0; i < size(); ++i) {
    cumulative += probability(i);
    if (cumulative >= 0.5) return run_length(i);
  }
  return run_length(size() - 1);
}

// ---------------------------------------------------------------------------
// Bocpd

StatusOr<Bocpd> Bocpd::Create(const BocpdOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("bocpd: " + why);
  return Bocpd(options);
}

Bocpd::Bocpd(const BocpdOptions& options, std::shared_ptr<const RunLengthTables> tables)
    : options_(options),
      posterior_(options, std::move(tables)),
      times_(static_cast<std::size_t>(options.window)),
      snapshots_(static_cast<std::size_t>(options.window) + 1) {}

void Bocpd::Reset() {
  posterior_.Reset();
  std::fill(times_.begin(), times_.end(), EventTime{0});
  std::fill(snapshots_.begin(), snapshots_.end(), Snapshot{});
  time_at_ = snapshot_at_ = 0;
  change_probability_ = 0.0;
  above_ = false;
  alarms_ = 0;
}

StatusOr<Alarm> Bocpd::Update(double x, EventTime time) {
  if (!std::isfinite(x) || std::abs(x) > kBocpdMaxAbsReading) {
    return Status::InvalidArgument(
        "bocpd: reading must be finite with |x| <= 1e100, got " + std::to_string(x));
  }
  posterior_.Update(x);
  // Reading t goes to t mod w and t mod (w + 1): step the ring positions
  // (cheaper than dividing).
  time_at_ = time_at_ + 1 == times_.size() ? 0 : time_at_ + 1;
  snapshot_at_ = snapshot_at_ + 1 == snapshots_.size() ? 0 : snapshot_at_ + 1;
  times_[time_at_] = time;
  const int best = posterior_.MostProbableRunIndex();
  snapshots_[snapshot_at_] = Snapshot{posterior_.mean(best), posterior_.variance(best)};
  change_probability_ = posterior_.ProbabilityWithin(options_.window);

  Alarm alarm;
  alarm.statistic = change_probability_;
  const bool above = armed() && change_probability_ > options_.threshold;
  if (above) {
    alarm.fired = !above_;
    const ChangeEstimate estimate = EstimateChange();
    alarm.change_at = estimate.change_at;
    alarm.length = estimate.run_length;
    alarm.direction = estimate.direction;
    alarm.shift = estimate.shift;
  }
  above_ = above;
  if (alarm.fired) ++alarms_;
  return alarm;
}

ChangeEstimate Bocpd::EstimateChange() const {
  ChangeEstimate estimate;
  const RunLengthPosterior& p = posterior_;
  int short_run = -1;
  for (int i = 1; i < p.size() && p.run_length(i) <= options_.window; ++i) {
    if (short_run < 0 || p.probability(i) > p.probability(short_run)) short_run = i;
  }
  if (short_run < 0) return estimate;
  const std::int64_t t = p.readings();
  const int s = p.run_length(short_run);
  estimate.run_length = s;
  estimate.probability = p.probability(short_run);
  estimate.change_at = times_[static_cast<std::size_t>((t - s + 1) % options_.window)];
  estimate.mean_after = p.mean(short_run);
  estimate.variance_after = p.variance(short_run);
  if (t - s == 0) {
    estimate.mean_before = options_.mu0;
    estimate.variance_before = options_.beta0 / options_.alpha0;
  } else {
    const Snapshot& before =
        snapshots_[static_cast<std::size_t>((t - s) % (options_.window + 1))];
    estimate.mean_before = before.mean;
    estimate.variance_before = before.variance;
  }
  estimate.shift = estimate.mean_after - estimate.mean_before;
  estimate.direction = estimate.shift > 0.0   ? Direction::kUp
                       : estimate.shift < 0.0 ? Direction::kDown
                                              : Direction::kNone;
  return estimate;
}

RunLengthSummary Bocpd::Summary() const {
  RunLengthSummary summary;
  summary.readings = posterior_.readings();
  summary.live_hypotheses = posterior_.size();
  summary.map_run_length = posterior_.MapRunLength();
  summary.map_probability = posterior_.MapProbability();
  summary.mean_run_length = posterior_.MeanRunLength();
  summary.median_run_length = posterior_.MedianRunLength();
  summary.change_probability = change_probability_;
  summary.cap_probability = posterior_.ProbabilityOf(posterior_.max_run_length());
  summary.armed = armed();
  return summary;
}

// Only the live slots [begin_, end_) are written (the rest is scratch or
// stale), which keeps a capped posterior's state near its live size.
void RunLengthPosterior::Save(SnapshotWriter& w) const {
  w.Tag("RUNL");
  w.U64(slots_);
  w.U64(begin_);
  w.U64(end_);
  for (const auto* v : {&mu_, &beta_, &log_mass_, &weight_}) {
    w.Doubles(v->data() + begin_, end_ - begin_);
  }
  for (std::size_t i = begin_; i < end_; ++i) w.I64(birth_[i]);
  w.U64(map_slot_);
  w.F64(scale_);
  w.F64(log_shift_);
  w.DoubleVector(recent_);
  w.U64(recent_at_);
  w.I64(readings_);
  w.F64(log_evidence_);
  w.F64(last_log_predictive_);
}

Status RunLengthPosterior::Load(SnapshotReader& r) {
  r.Tag("RUNL");
  const std::uint64_t slots = r.U64();
  const std::uint64_t begin = r.U64();
  const std::uint64_t end = r.U64();
  if (!r.ok()) return r.status();
  // At least the r = 0 state, at most R + 1 states (the cap merges the rest).
  if (slots != slots_ || begin >= end || end > slots_ ||
      end - begin > static_cast<std::uint64_t>(cap_) + 1) {
    return r.Fail("run-length posterior does not fit this cap");
  }
  if ((end - begin) * 40 > r.remaining())
    return r.Fail("run-length states run past the end");
  begin_ = static_cast<std::size_t>(begin);
  end_ = static_cast<std::size_t>(end);
  const std::size_t n = end_ - begin_;
  for (auto* v : {&mu_, &beta_, &log_mass_, &weight_}) std::fill(v->begin(), v->end(), 0.0);
  r.FiniteDoubles(mu_.data() + begin_, n, "run-length mean");
  r.FiniteDoubles(beta_.data() + begin_, n, "run-length rate");
  r.FiniteDoubles(log_mass_.data() + begin_, n, "run-length log mass");
  r.FiniteDoubles(weight_.data() + begin_, n, "run-length weight");
  std::fill(birth_.begin(), birth_.end(), 0);
  for (std::size_t i = begin_; i < end_; ++i) birth_[i] = r.I64();
  map_slot_ = static_cast<std::size_t>(r.U64());
  scale_ = r.Finite("run-length scale");
  log_shift_ = r.Finite("run-length log shift");
  const std::size_t states = recent_.size();
  recent_.assign(r.BoundedCount(8, states, "run-length recent readings"), 0.0);
  r.FiniteDoubles(recent_.data(), recent_.size(), "run-length recent reading");
  recent_at_ = static_cast<std::size_t>(r.U64());
  readings_ = r.Counter("run-length readings");
  log_evidence_ = r.Finite("run-length log evidence");
  last_log_predictive_ = r.Finite("run-length log predictive");
  if (!r.ok()) return r.status();
  if (recent_.size() != states || recent_at_ >= states || map_slot_ < begin_ ||
      map_slot_ >= end_) {
    return r.Fail("run-length posterior does not fit this cap");
  }
  if (!(scale_ > 0)) return r.Fail("run-length scale is not positive");
  // The update indexes its per-age tables by readings - birth, so every run
  // length must be in [0, R], the oldest state first, and the newest r = 0.
  std::int64_t previous = -1;
  for (std::size_t i = begin_; i < end_; ++i) {
    const std::int64_t run = readings_ - birth_[i];
    if (birth_[i] < 0 || run < 0 || run > cap_ || (i > begin_ && run >= previous)) {
      return r.Fail("run-length state " + std::to_string(i - begin_) +
                    " has an impossible run length");
    }
    previous = run;
    if (!(beta_[i] > 0)) return r.Fail("run-length rate is not positive");
    if (weight_[i] < 0) return r.Fail("run-length weight is negative");
  }
  if (previous != 0) return r.Fail("run-length posterior lacks its r = 0 state");
  return r.status();
}

void Bocpd::Save(SnapshotWriter& w) const {
  w.Tag("BOCP");
  posterior_.Save(w);
  w.I64Vector(times_);
  w.U64(snapshots_.size());
  for (const Snapshot& s : snapshots_) {
    w.F64(s.mean);
    w.F64(s.variance);
  }
  w.U64(time_at_);
  w.U64(snapshot_at_);
  w.F64(change_probability_);
  w.Bool(above_);
  w.I64(alarms_);
}

Status Bocpd::Load(SnapshotReader& r) {
  r.Tag("BOCP");
  if (Status status = posterior_.Load(r); !status.ok()) return status;
  const std::size_t window = times_.size();
  times_ = r.I64Vector();
  if (r.ok() && times_.size() != window) return r.Fail("BOCPD window differs");
  for (EventTime t : times_) {
    if (r.ok() && (t < -SnapshotReader::kMaxTime || t > SnapshotReader::kMaxTime)) {
      return r.Fail("BOCPD reading time " + std::to_string(t) + " is out of the time range");
    }
  }
  if (r.Count(16) != snapshots_.size()) return r.Fail("BOCPD window differs");
  for (Snapshot& s : snapshots_) {
    s.mean = r.Finite("BOCPD run mean");
    s.variance = r.NonNegative("BOCPD run variance");
  }
  time_at_ = static_cast<std::size_t>(r.U64());
  snapshot_at_ = static_cast<std::size_t>(r.U64());
  change_probability_ = r.NonNegative("BOCPD change probability");
  above_ = r.Bool();
  alarms_ = r.Counter("BOCPD alarms");
  if (r.ok() && (time_at_ >= times_.size() || snapshot_at_ >= snapshots_.size())) {
    return r.Fail("BOCPD ring position out of range");
  }
  // Rounding may put a sum of probabilities a few ulps past 1, never further.
  if (r.ok() && change_probability_ > 1.0 + 1e-9) {
    return r.Fail("BOCPD change probability is above 1");
  }
  return r.status();
}

}  // namespace plumbline
