#pragma once
// Digital Butterworth band-pass and zero-phase (forward-backward) filtering.
//
// Design: analog Butterworth low-pass prototype (poles on the unit circle),
// low-pass -> band-pass transformation around the pre-warped band edges,
// bilinear transform (Oppenheim & Schafer, "Discrete-Time Signal
// Processing", 3rd ed., sec. 7.1.2 and 7.4), then zeros/poles/gain ->
// second-order sections. Semantics follow scipy.signal.butter(order,
// [low_hz, high_hz], btype='bandpass', fs=rate): a band-pass of `order`
// has 2*order poles. Filtering follows scipy.signal.sosfiltfilt (odd
// extension padding, steady-state initial conditions as sosfilt_zi).
//
// Filtering is always done with second-order sections: the expanded (b, a)
// form of an 8-pole band-pass with a 0.1 Hz corner at 100 Hz has poles
// within 0.004 of z = 1, and rounding its polynomial coefficients moves a
// pole outside the unit circle (SciPy's own filtfilt(b, a) diverges there;
// measured with tests/reference/scipy_butterworth.py), so TransferFunction()
// is for coefficient checks only.

#include <array>
#include <cstddef>
#include <string>
#include <vector>

namespace fluxtrim::core {

struct BandPassOptions {
  int order = 4;         // prototype order; the band-pass has 2*order poles
  double low_hz = 0.1;   // lower -3 dB edge (Hz)
  double high_hz = 0.9;  // upper -3 dB edge (Hz); clipped below Nyquist
  // True when 1 <= order <= 12 and 0 < low_hz < high_hz, all finite.
  // (The sample rate is checked by BandPass.)
  bool IsValid(std::string* error) const;
};

class BandPass {
 public:
  // Highest usable upper edge, as a fraction of the Nyquist frequency. An
  // upper edge at or above Nyquist makes the bilinear pre-warp diverge, so
  // high_hz is clipped to kMaxHighFraction * rate/2 and clipped() is set.
  static constexpr double kMaxHighFraction = 0.95;

  // Throws std::invalid_argument when the options are invalid, the sample
  // rate is not positive and finite, or the band is empty after clipping
  // (low_hz >= clipped high_hz).
  BandPass(const BandPassOptions& options, double sample_rate_hz);

  // Zero-phase filtering, scipy.signal.sosfiltfilt(sos, x) semantics
  // (padtype='odd', padlen = 3 * (2 * sections + 1 - min(number of
  // sections with b2 = 0, number with a2 = 0)), i.e. 3 * (2*order + 1) for
  // the band-pass). Input must be finite and at least min_length() samples;
  // shorter input throws std::invalid_argument (callers skip such segments),
  // as does a non-finite sample (use FilterWithGaps). The first sample is
  // subtracted before filtering (same output, far less rounding on a
  // 50000 nT field). y may alias x.
  std::vector<double> Filter(const std::vector<double>& x) const;
  void Filter(const double* x, std::size_t n, double* y) const;

  // Several channels at once, each exactly as Filter (the same operations
  // in the same order, so the same bits), in one pass over memory: sample i
  // of channel c is x[i * x_stride + c] (row-major, e.g. a row of the term
  // matrix), c < channels. Output samples [out_begin, out_end) of channel c
  // go to y[c * y_column_stride + (i - out_begin)] (column-major, e.g. an
  // Eigen column block). Same requirements and exceptions as Filter.
  void FilterChannels(const double* x, std::size_t n, std::size_t x_stride,
                      std::size_t channels, std::size_t out_begin,
                      std::size_t out_end, double* y,
                      std::size_t y_column_stride) const;

  // Filters each maximal run of finite samples on its own (a gap restarts
  // the filter, as a new recording would). Samples in gaps and in runs
  // shorter than min_length() come out NaN; their count goes to
  // *unfiltered when given.
  std::vector<double> FilterWithGaps(const std::vector<double>& x,
                                     std::size_t* unfiltered = nullptr) const;

  // Shortest input Filter accepts: padlen + 1 samples (scipy requires
  // x.shape[axis] > padlen).
  std::size_t min_length() const;
  // Length of the odd extension added at each end (samples).
  std::size_t pad_length() const { return pad_length_; }

  // Second-order sections, scipy layout {b0, b1, b2, a0, a1, a2} with
  // a0 = 1; the overall gain is folded into the first section.
  const std::vector<std::array<double, 6>>& sections() const {
    return sections_;
  }

  // Transfer function H(z) = b(z^-1) / a(z^-1), coefficients in increasing
  // powers of z^-1 (a[0] = 1), as scipy.signal.butter(..., output='ba').
  // Numerically unsound to filter with for narrow low bands (see above).
  void TransferFunction(std::vector<double>* b, std::vector<double>* a) const;

  double low_hz() const { return low_hz_; }
  double high_hz() const { return high_hz_; }  // after clipping
  bool clipped() const { return clipped_; }
  double sample_rate_hz() const { return rate_hz_; }
  int order() const { return order_; }

 private:
  int order_ = 0;
  double rate_hz_ = 0;
  double low_hz_ = 0;
  double high_hz_ = 0;
  bool clipped_ = false;
  std::size_t pad_length_ = 0;
  std::vector<std::array<double, 6>> sections_;
  // sosfilt_zi: steady-state state of each section for a unit step input
  // (direct form II transposed, 2 states per section).
  std::vector<std::array<double, 2>> zi_;
  // Zeros, poles and gain of the digital filter (for TransferFunction).
  std::vector<double> zeros_real_;            // all zeros are real (+1 and -1)
  std::vector<std::array<double, 2>> poles_;  // {re, im}
  double gain_ = 0;
};

}  // namespace fluxtrim::core

namespace fluxtrim::core {

// Causal (real-time) band-pass with the sections of a BandPass, run on
// several channels at once: per channel, scipy.signal.sosfilt(sos, x, zi =
// sosfilt_zi(sos) * x[0]) (direct form II transposed), i.e. the filter starts
// in the steady state of the first sample, so a constant level gives no
// start-up transient. Implemented as sosfilt(sos, x - x[0]) from rest, which
// is the same output because the band-pass rejects a constant (zeros at
// z = 1), and better conditioned on a 50000 nT field. Unlike BandPass::Filter
// the output has the filter's phase delay. No allocation after construction.
class CausalBandPass {
 public:
  CausalBandPass(const BandPass& band_pass, std::size_t channels);

  // One sample of every channel: x[0..channels) in, y[0..channels) out
  // (y may alias x). Inputs must be finite; call Reset() across a gap.
  void Step(const double* x, double* y);
  // Back to rest; the next sample sets the reference levels again.
  void Reset();

  std::size_t channels() const { return channels_; }
  // Samples filtered since construction or the last Reset().
  std::size_t samples() const { return samples_; }

 private:
  std::vector<std::array<double, 6>> sections_;
  std::size_t channels_ = 0;
  std::size_t samples_ = 0;
  std::vector<double> level_;  // per channel, first sample
  std::vector<double> state_;  // [channel][section][2], row-major
};

}  // namespace fluxtrim::core
