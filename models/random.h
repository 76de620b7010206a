#pragma once
// Portable random numbers for the simulator. std::mt19937_64 is specified
// bit for bit by the C++ standard, but std::uniform_real_distribution and
// std::normal_distribution are not (each standard library has its own
// algorithm), so the deviates are made here by explicit formulas. With the
// same seed a simulation therefore repeats exactly wherever the C library's
// sqrt/log/sin/cos return the same values (sqrt always does; glibc's
// log/sin/cos are deterministic on one platform).

#include <cstdint>
#include <random>

namespace fluxtrim::models {

// SplitMix64 finaliser (Steele, Lea & Flood 2014, "Fast splittable
// pseudorandom number generators", OOPSLA; constants from memory): mixes a
// seed and a stream number into well-separated engine seeds.
std::uint64_t SplitMix64(std::uint64_t x);

// Independent streams: one per random element of a simulation, so that
// switching one element on or off leaves the others unchanged.
enum class RandomStream : std::uint64_t {
  kTurbulence = 1,
  kGeology = 2,
  kDiurnal = 3,
  kCurrents = 4,
  kScalarNoise = 5,
  kFluxgateNoise = 6,
  kAttitudeNoise = 7,
  kSpikes = 8,
  kDropouts = 9,
  kTemperature = 10,
  kCurrentNoise = 11,
};

class Random {
 public:
  Random(std::uint64_t seed, RandomStream stream);

  std::uint64_t Next() { return engine_(); }
  // Uniform on [0, 1): the top 53 bits of one engine output times 2^-53.
  double Uniform();
  // Uniform on [a, b).
  double Uniform(double a, double b) { return a + (b - a) * Uniform(); }
  // Standard normal deviate, Box-Muller (Box & Muller 1958, Ann. Math.
  // Stat. 29:610): sqrt(-2 ln u1) cos(2 pi u2) with u1 in (0, 1]; one
  // deviate per pair of uniforms (the sine twin is not kept, so the value
  // depends only on the number of calls before it).
  double Normal();

 private:
  std::mt19937_64 engine_;
};

}  // namespace fluxtrim::models
