// A small seeded random source for simulation (calibration tables, Monte Carlo
// checks, synthetic streams). xoshiro256** (Blackman and Vigna 2018) seeded by
// splitmix64, with Marsaglia's polar method for normals. Hand-written rather than
// <random> distributions so a seed gives the same numbers with any standard
// library. Not thread-safe: one generator per thread.
#pragma once

#include <cmath>
#include <cstdint>

namespace plumbline {

class Random {
 public:
  explicit Random(std::uint64_t seed) {
    for (auto& word : state_) word = SplitMix(seed);
  }

  std::uint64_t NextU64() {
    const std::uint64_t result = Rotl(state_[1] * 5, 7) * 9;
    const std::uint64_t t = state_[1] << 17;
    state_[2] ^= state_[0];
    state_[3] ^= state_[1];
    state_[1] ^= state_[2];
    state_[0] ^= state_[3];
    state_[2] ^= t;
    state_[3] = Rotl(state_[3], 45);
    return result;
  }

  // Uniform on [0, 1), 53 random bits.
  double Uniform() { return static_cast<double>(NextU64() >> 11) * 0x1.0p-53; }

  // Uniform on (0, 1): safe to take the logarithm of.
  double UniformOpen() {
    double u;
    do u = Uniform(); while (u == 0.0);
    return u;
  }

  // Standard normal, Marsaglia's polar method (caches the second variate).
  double Normal() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    double u, v, s;
    do {
      u = 2.0 * Uniform() - 1.0;
      v = 2.0 * Uniform() - 1.0;
      s = u * u + v * v;
    } while (s >= 1.0 || s == 0.0);
    const double factor = std::sqrt(-2.0 * std::log(s) / s);
    spare_ = v * factor;
    has_spare_ = true;
    return u * factor;
  }

  // Exponential with the given mean.
  double Exponential(double mean) { return -mean * std::log(UniformOpen()); }

  // Poisson with the given mean: Knuth's product method, with means above 30
  // split into independent chunks (a sum of independent Poissons is Poisson).
  std::int64_t Poisson(double mean) {
    std::int64_t total = 0;
    while (mean > 30.0) {  // split large means into independent chunks
      total += PoissonSmall(30.0);
      mean -= 30.0;
    }
    return total + PoissonSmall(mean);
  }

 private:
  static std::uint64_t Rotl(std::uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  static std::uint64_t SplitMix(std::uint64_t& x) {
    std::uint64_t z = (x += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
  }
  std::int64_t PoissonSmall(double mean) {
    const double limit = std::exp(-mean);
    std::int64_t k = 0;
    double product = Uniform();
    while (product > limit) {
      ++k;
      product *= Uniform();
    }
    return k;
  }

  std::uint64_t state_[4];
  bool has_spare_ = false;
  double spare_ = 0.0;
};

}  // namespace plumbline
