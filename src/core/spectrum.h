#pragma once
// Discrete Fourier transform and the amplitude spectrum of a sampled series
// (Welch averaging of Hann-windowed segments), for the report's spectrum
// plot and for inspecting sensor noise.

#include <complex>
#include <cstddef>
#include <string>
#include <vector>

namespace fluxtrim::core {

// In-place discrete Fourier transform of any length n >= 1, same convention
// as numpy.fft.fft / numpy.fft.ifft:
//   forward  X[k] = sum_{j=0}^{n-1} x[j] exp(-2 pi i j k / n)
//   inverse  x[j] = (1/n) sum_{k=0}^{n-1} X[k] exp(+2 pi i j k / n)
// Powers of two use the iterative radix-2 Cooley-Tukey algorithm (Cooley &
// Tukey 1965); other lengths use Bluestein's chirp-z algorithm (Bluestein
// 1970), which rewrites the transform as a power-of-two circular
// convolution. O(n log n) for every n.
void Fft(std::vector<std::complex<double>>* data, bool inverse = false);

struct SpectrumOptions {
  double sample_rate_hz = 10.0;
  // Welch segment length, samples. Clipped to the series length when the
  // series is shorter. Any length works (the FFT is not limited to powers
  // of two); frequency resolution is sample_rate_hz / segment_length.
  std::size_t segment_length = 1024;
  // Fraction of a segment shared with the next, in [0, 1). Segments start
  // every segment_length - floor(overlap * segment_length) samples.
  double overlap = 0.5;
  // Runs of at most this many non-finite samples with finite samples on
  // both sides are bridged by linear interpolation before the transform
  // (isolated dropouts would otherwise discard whole segments); 0 = none.
  std::size_t fill_gaps_up_to = 0;

  // False (with a reason in *error) for a rate <= 0 or non-finite, a
  // segment shorter than 2 samples, or overlap outside [0, 1).
  bool IsValid(std::string* error) const;
};

// One-sided spectrum, bins k = 0 .. floor(m/2) for segment length m.
//
// Method (Welch 1967, "The use of fast Fourier transform for the estimation
// of power spectra", IEEE Trans. Audio Electroacoustics 15:70): each segment
// has its mean removed and is multiplied by the periodic Hann window
//   w[j] = 0.5 - 0.5 cos(2 pi j / m),  j = 0..m-1
// (the "DFT-even" Hann of Harris 1978, as scipy.signal.get_window('hann')),
// transformed, and |X_k|^2 is averaged over the segments. This is
// scipy.signal.welch(x, fs, window='hann', nperseg=m, noverlap=...,
// detrend='constant') exactly.
struct Spectrum {
  std::vector<double> frequency_hz;  // k * rate / m
  // Peak amplitude, same unit as the series (nT): a sinusoid A cos(2 pi f t)
  // with f on a bin reads A at that bin. amplitude = 2 sqrt(P_k) for
  // interior bins and sqrt(P_k) at k = 0 and at Nyquist (even m), with
  // P_k = mean |X_k|^2 / (sum w)^2 the two-sided power per bin (so the
  // interior value is sqrt(2 x scipy's one-sided scaling='spectrum')).
  std::vector<double> amplitude;
  // One-sided amplitude spectral density, unit/sqrt(Hz) (nT/sqrt(Hz)):
  // sqrt of scipy's scaling='density', i.e. mean |X_k|^2 / (rate sum w^2),
  // doubled except at k = 0 and Nyquist. White noise of standard deviation
  // s reads s / sqrt(rate / 2).
  std::vector<double> density;
  std::size_t segment_length = 0;    // m actually used
  std::size_t segments_used = 0;
  std::size_t segments_skipped = 0;  // segments holding a non-finite sample
  std::size_t samples_bridged = 0;   // non-finite samples interpolated
  bool usable = false;               // at least one segment was used
  std::string message;               // why not usable, or notes
};

// Throws std::invalid_argument when !options.IsValid(). A series with fewer
// than 2 samples, or where every segment holds a non-finite sample, gives
// usable == false and empty vectors (never NaN values).
Spectrum AmplitudeSpectrum(const std::vector<double>& series,
                           const SpectrumOptions& options);

}  // namespace fluxtrim::core
