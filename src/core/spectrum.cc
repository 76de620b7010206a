#include "src/core/spectrum.h"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <stdexcept>
#include <utility>

namespace fluxtrim::core {
namespace {

constexpr double kPi = 3.14159265358979323846;

bool IsPowerOfTwo(std::size_t n) { return n != 0 && (n & (n - 1)) == 0; }

// Iterative radix-2 Cooley-Tukey, n a power of two; sign -1 forward, +1
// inverse (unscaled).
void Radix2(std::vector<std::complex<double>>& a, int sign) {
  const std::size_t n = a.size();
  for (std::size_t i = 1, j = 0; i < n; ++i) {  // bit-reversal permutation
    std::size_t bit = n >> 1;
    for (; j & bit; bit >>= 1) j ^= bit;
    j ^= bit;
    if (i < j) std::swap(a[i], a[j]);
  }
  for (std::size_t len = 2; len <= n; len <<= 1) {
    const std::size_t half = len / 2;
    // Twiddles from cos/sin of each index (not by repeated multiplication),
    // so rounding does not accumulate along a stage.
    for (std::size_t k = 0; k < half; ++k) {
      const double angle = sign * 2.0 * kPi * static_cast<double>(k) /
                           static_cast<double>(len);
      const std::complex<double> w(std::cos(angle), std::sin(angle));
      for (std::size_t start = 0; start < n; start += len) {
        const std::complex<double> u = a[start + k];
        const std::complex<double> v = a[start + k + half] * w;
        a[start + k] = u + v;
        a[start + k + half] = u - v;
      }
    }
  }
}

// Bluestein (1970): with j k = (j^2 + k^2 - (k - j)^2) / 2,
//   X[k] = conj(c_k) sum_j (x_j conj(c_j)) c_{k-j},  c_m = exp(i pi m^2 / n)
// for the forward sign; a circular convolution of power-of-two length
// M >= 2n - 1.
void Bluestein(std::vector<std::complex<double>>& x, int sign) {
  const std::size_t n = x.size();
  std::size_t m = 1;
  while (m < 2 * n - 1) m <<= 1;
  std::vector<std::complex<double>> chirp(n);
  const std::uint64_t two_n = 2 * static_cast<std::uint64_t>(n);
  for (std::size_t j = 0; j < n; ++j) {
    // j^2 mod 2n keeps the angle small and exact for large j.
    const std::uint64_t jj =
        (static_cast<std::uint64_t>(j) * static_cast<std::uint64_t>(j)) %
        two_n;
    const double angle =
        -sign * kPi * static_cast<double>(jj) / static_cast<double>(n);
    chirp[j] = std::complex<double>(std::cos(angle), std::sin(angle));
  }
  // chirp[j] = exp(-sign i pi j^2 / n): c_j for the forward transform.
  std::vector<std::complex<double>> a(m), b(m);
  for (std::size_t j = 0; j < n; ++j) a[j] = x[j] * std::conj(chirp[j]);
  b[0] = chirp[0];
  for (std::size_t j = 1; j < n; ++j) b[j] = b[m - j] = chirp[j];
  Radix2(a, -1);
  Radix2(b, -1);
  for (std::size_t j = 0; j < m; ++j) a[j] *= b[j];
  Radix2(a, +1);
  const double scale = 1.0 / static_cast<double>(m);
  for (std::size_t k = 0; k < n; ++k) x[k] = a[k] * scale * std::conj(chirp[k]);
}

}  // namespace

void Fft(std::vector<std::complex<double>>* data, bool inverse) {
  std::vector<std::complex<double>>& x = *data;
  const std::size_t n = x.size();
  if (n <= 1) return;
  const int sign = inverse ? +1 : -1;
  if (IsPowerOfTwo(n)) {
    Radix2(x, sign);
  } else {
    Bluestein(x, sign);
  }
  if (inverse) {
    const double scale = 1.0 / static_cast<double>(n);
    for (auto& v : x) v *= scale;
  }
}

bool SpectrumOptions::IsValid(std::string* error) const {
  std::string reason;
  if (!(sample_rate_hz > 0.0) || !std::isfinite(sample_rate_hz)) {
    reason = "sample_rate_hz must be a positive finite number";
  } else if (segment_length < 2) {
    reason = "segment_length must be at least 2 samples";
  } else if (!(overlap >= 0.0 && overlap < 1.0)) {
    reason = "overlap must be in [0, 1)";
  }
  if (error != nullptr) *error = reason;
  return reason.empty();
}

Spectrum AmplitudeSpectrum(const std::vector<double>& input,
                           const SpectrumOptions& options) {
  std::string error;
  if (!options.IsValid(&error)) {
    throw std::invalid_argument("spectrum options: " + error);
  }
  Spectrum out;
  const std::size_t n = input.size();
  // Bridge short dropouts on a copy; leave the caller's series alone.
  std::vector<double> bridged;
  const std::vector<double>* source = &input;
  if (options.fill_gaps_up_to > 0) {
    for (std::size_t i = 0; i < n;) {
      if (std::isfinite(input[i])) {
        ++i;
        continue;
      }
      std::size_t j = i;
      while (j < n && !std::isfinite(input[j])) ++j;
      if (i > 0 && j < n && j - i <= options.fill_gaps_up_to) {
        if (bridged.empty()) bridged = input;
        const double a = input[i - 1], b = input[j];
        const double span = static_cast<double>(j - i + 1);
        for (std::size_t k = i; k < j; ++k) {
          bridged[k] = a + (b - a) * static_cast<double>(k - i + 1) / span;
        }
        out.samples_bridged += j - i;
      }
      i = j;
    }
    if (!bridged.empty()) source = &bridged;
  }
  const std::vector<double>& series = *source;
  if (n < 2) {
    out.message = "fewer than 2 samples";
    return out;
  }
  const std::size_t m = std::min(options.segment_length, n);
  out.segment_length = m;
  const std::size_t overlap_samples =
      static_cast<std::size_t>(std::floor(options.overlap * m));
  const std::size_t step = std::max<std::size_t>(1, m - overlap_samples);

  std::vector<double> window(m);
  double sum_w = 0.0, sum_w2 = 0.0;
  for (std::size_t j = 0; j < m; ++j) {
    window[j] = 0.5 - 0.5 * std::cos(2.0 * kPi * static_cast<double>(j) /
                                     static_cast<double>(m));
    sum_w += window[j];
    sum_w2 += window[j] * window[j];
  }
  const std::size_t bins = m / 2 + 1;
  std::vector<double> power(bins, 0.0);  // sum over segments of |X_k|^2
  std::vector<std::complex<double>> buffer(m);
  for (std::size_t start = 0; start + m <= n; start += step) {
    bool finite = true;
    double mean = 0.0;
    for (std::size_t j = 0; j < m; ++j) {
      const double v = series[start + j];
      if (!std::isfinite(v)) {
        finite = false;
        break;
      }
      mean += v;
    }
    if (!finite) {
      ++out.segments_skipped;
      continue;
    }
    mean /= static_cast<double>(m);
    for (std::size_t j = 0; j < m; ++j) {
      buffer[j] = std::complex<double>((series[start + j] - mean) * window[j],
                                       0.0);
    }
    Fft(&buffer);
    for (std::size_t k = 0; k < bins; ++k) power[k] += std::norm(buffer[k]);
    ++out.segments_used;
  }
  if (out.segments_used == 0) {
    out.message = "every segment holds a non-finite sample";
    return out;
  }
  const double segments = static_cast<double>(out.segments_used);
  const double rate = options.sample_rate_hz;
  out.frequency_hz.resize(bins);
  out.amplitude.resize(bins);
  out.density.resize(bins);
  for (std::size_t k = 0; k < bins; ++k) {
    const bool edge = (k == 0) || (m % 2 == 0 && k == m / 2);
    const double one_sided = edge ? 1.0 : 2.0;
    const double mean_power = power[k] / segments;
    out.frequency_hz[k] = static_cast<double>(k) * rate / static_cast<double>(m);
    // |X_k| = (A/2) sum w for an on-bin sinusoid of amplitude A.
    out.amplitude[k] = one_sided * std::sqrt(mean_power) / sum_w;
    out.density[k] = std::sqrt(one_sided * mean_power / (rate * sum_w2));
  }
  out.usable = true;
  if (out.samples_bridged > 0) {
    out.message = std::to_string(out.samples_bridged) +
                  " non-finite sample(s) bridged by interpolation";
  }
  if (out.segments_skipped > 0) {
    if (!out.message.empty()) out.message += "; ";
    out.message += std::to_string(out.segments_skipped) +
                   " segment(s) skipped for non-finite samples";
  }
  return out;
}

}  // namespace fluxtrim::core
