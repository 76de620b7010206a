#include "models/random.h"

#include <cmath>

namespace fluxtrim::models {

std::uint64_t SplitMix64(std::uint64_t x) {
  x += 0x9e3779b97f4a7c15ULL;
  x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
  x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
  return x ^ (x >> 31);
}

Random::Random(std::uint64_t seed, RandomStream stream)
    : engine_(SplitMix64(SplitMix64(seed) ^
                         static_cast<std::uint64_t>(stream))) {}

double Random::Uniform() {
  return static_cast<double>(engine_() >> 11) * 0x1.0p-53;
}

double Random::Normal() {
  constexpr double kTwoPi = 6.283185307179586476925;
  // (k + 1) 2^-53 for k in [0, 2^53): never zero, so the log is finite.
  const double u1 = static_cast<double>((engine_() >> 11) + 1) * 0x1.0p-53;
  const double u2 = Uniform();
  return std::sqrt(-2.0 * std::log(u1)) * std::cos(kTwoPi * u2);
}

}  // namespace fluxtrim::models
