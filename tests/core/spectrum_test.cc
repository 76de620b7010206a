// FFT and Welch amplitude spectrum, checked live against NumPy
// (numpy.fft.fft / ifft) and SciPy (scipy.signal.welch) run through
// FLUXTRIM_PYTHON (Debian's python3-numpy and python3-scipy), plus two
// closed-form properties (an on-bin sinusoid; Parseval for white noise).

#include "src/core/spectrum.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <cmath>
#include <complex>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <limits>
#include <random>
#include <sstream>
#include <string>
#include <vector>

namespace fluxtrim::core {
namespace {

namespace fs = std::filesystem;
constexpr double kPi = 3.14159265358979323846;

// FFT round-off grows like eps * log2(n) * ||x|| (Higham 2002, "Accuracy
// and Stability of Numerical Algorithms", 2nd ed., section 24.1, from
// memory); Bluestein chains three FFTs of length up to 4n. With n <= 4096,
// eps = 2.2e-16 and a few ulps per butterfly, 1e-12 relative to the largest
// |X| leaves two orders of margin and still catches any real error (a wrong
// twiddle or sign is O(1)).
constexpr double kFftRelTol = 1e-12;
// Welch output is a square root of an average of |X|^2: the same bound.
constexpr double kWelchRelTol = 1e-10;

class SpectrumTest : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = fs::temp_directory_path() /
           ("fluxtrim_spectrum_test_" + std::to_string(::getpid()) + "_" +
            ::testing::UnitTest::GetInstance()->current_test_info()->name());
    fs::create_directories(dir_);
  }
  void TearDown() override { fs::remove_all(dir_); }

  // Runs a Python script with FLUXTRIM_PYTHON once for several inputs (one
  // Python start-up: importing NumPy dominates the run time). The script
  // gets pairs "in out" of file names and writes numbers to each "out".
  std::vector<std::vector<double>> RunPython(
      const std::string& script, const std::vector<std::vector<double>>& inputs) {
    const fs::path py = dir_ / "script.py";
    std::ofstream(py) << script;
    std::string cmd = std::string(FLUXTRIM_PYTHON) + " " + py.string();
    for (std::size_t i = 0; i < inputs.size(); ++i) {
      const fs::path in = dir_ / ("in" + std::to_string(i) + ".txt");
      std::ofstream f(in);
      f.precision(17);
      for (double v : inputs[i]) f << v << "\n";
      cmd += " " + in.string() + " " + (dir_ / ("out" + std::to_string(i) + ".txt")).string();
    }
    EXPECT_EQ(std::system(cmd.c_str()), 0) << cmd;
    std::vector<std::vector<double>> outputs;
    for (std::size_t i = 0; i < inputs.size(); ++i) {
      std::vector<double> values;
      std::ifstream f(dir_ / ("out" + std::to_string(i) + ".txt"));
      std::string token;
      while (f >> token) values.push_back(std::strtod(token.c_str(), nullptr));
      outputs.push_back(values);
    }
    return outputs;
  }

  fs::path dir_;
};

std::vector<double> TestSignal(std::size_t n, std::uint64_t seed) {
  std::mt19937_64 engine(seed);
  std::vector<double> x(n);
  for (std::size_t i = 0; i < n; ++i) {
    // Raw engine bits to (-1, 1): portable across standard libraries.
    const double u = (static_cast<double>(engine() >> 11) + 0.5) * 0x1.0p-53;
    x[i] = 2.0 * u - 1.0 + 3.0 * std::sin(0.37 * static_cast<double>(i)) + 1.5;
  }
  return x;
}

const char* const kNumpyFft = R"PY(
import sys, numpy as np
for src, dst in zip(sys.argv[1::2], sys.argv[2::2]):
    x = np.loadtxt(src, ndmin=1)
    n = len(x) // 2
    z = x[:n] + 1j * x[n:]
    with open(dst, 'w') as out:
        for part in (np.fft.fft(z), np.fft.ifft(z)):
            for v in part:
                out.write('%r %r\n' % (float(v.real), float(v.imag)))
)PY";

TEST_F(SpectrumTest, FftMatchesNumpyForPowersOfTwoAndOtherLengths) {
  // Powers of two (radix-2), primes and composites (Bluestein), and the
  // trivial lengths.
  const std::vector<std::size_t> lengths = {1, 2, 3, 5, 8, 12, 97, 100, 1000, 1024, 4096};
  std::vector<std::vector<double>> inputs;
  for (std::size_t n : lengths) {
    std::vector<double> packed = TestSignal(n, 11 + n);
    const std::vector<double> im = TestSignal(n, 101 + n);
    packed.insert(packed.end(), im.begin(), im.end());
    inputs.push_back(packed);
  }
  const std::vector<std::vector<double>> refs = RunPython(kNumpyFft, inputs);
  ASSERT_EQ(refs.size(), lengths.size());
  double worst = 0.0;  // largest error relative to max |X|
  for (std::size_t c = 0; c < lengths.size(); ++c) {
    const std::size_t n = lengths[c];
    const std::vector<double>& ref = refs[c];
    ASSERT_EQ(ref.size(), 4 * n) << "n = " << n;
    const std::vector<double> re(inputs[c].begin(), inputs[c].begin() + n);
    const std::vector<double> im(inputs[c].begin() + n, inputs[c].end());
    std::vector<std::complex<double>> z(n);
    for (std::size_t i = 0; i < n; ++i) z[i] = {re[i], im[i]};
    std::vector<std::complex<double>> forward = z, inverse = z;
    Fft(&forward);
    Fft(&inverse, /*inverse=*/true);
    double scale_f = 0.0, scale_i = 0.0;
    for (std::size_t k = 0; k < n; ++k) {
      scale_f = std::max(scale_f, std::abs(std::complex<double>(ref[2 * k], ref[2 * k + 1])));
      scale_i = std::max(scale_i, std::abs(std::complex<double>(ref[2 * n + 2 * k],
                                                                ref[2 * n + 2 * k + 1])));
    }
    for (std::size_t k = 0; k < n; ++k) {
      const std::complex<double> f_ref(ref[2 * k], ref[2 * k + 1]);
      const std::complex<double> i_ref(ref[2 * n + 2 * k], ref[2 * n + 2 * k + 1]);
      worst = std::max(worst, std::abs(forward[k] - f_ref) / scale_f);
      worst = std::max(worst, std::abs(inverse[k] - i_ref) / scale_i);
      ASSERT_LE(std::abs(forward[k] - f_ref), kFftRelTol * scale_f)
          << "forward, n = " << n << ", k = " << k;
      ASSERT_LE(std::abs(inverse[k] - i_ref), kFftRelTol * scale_i)
          << "inverse, n = " << n << ", k = " << k;
    }
  }
  std::printf("worst FFT error vs NumPy, relative to max |X|: %.3g\n", worst);
}

TEST_F(SpectrumTest, InverseUndoesForwardOnLongPrimeLength) {
  // 65537 is prime: the longest Bluestein path the report meets (about
  // 1e5 samples). Round trip is an identity of the transform pair.
  const std::size_t n = 65537;
  const std::vector<double> re = TestSignal(n, 5);
  std::vector<std::complex<double>> z(n);
  for (std::size_t i = 0; i < n; ++i) z[i] = {re[i], -0.5 * re[(i * 7) % n]};
  std::vector<std::complex<double>> w = z;
  Fft(&w);
  Fft(&w, true);
  double worst = 0.0, scale = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    worst = std::max(worst, std::abs(w[i] - z[i]));
    scale = std::max(scale, std::abs(z[i]));
  }
  // Two transforms of length ~1e5 (Bluestein M = 262144): eps * log2(M) *
  // a few, times two: 1e-12 relative is ample (same reasoning as kFftRelTol).
  EXPECT_LE(worst, 1e-12 * scale);
}

const char* const kScipyWelch = R"PY(
import sys, numpy as np
from scipy.signal import welch
for src, dst in zip(sys.argv[1::2], sys.argv[2::2]):
    v = np.loadtxt(src)
    fs, nperseg, noverlap = v[0], int(v[1]), int(v[2])
    x = v[3:]
    f, pd = welch(x, fs=fs, window='hann', nperseg=nperseg, noverlap=noverlap,
                  detrend='constant', scaling='density')
    _, ps = welch(x, fs=fs, window='hann', nperseg=nperseg, noverlap=noverlap,
                  detrend='constant', scaling='spectrum')
    # Peak amplitude from the one-sided power spectrum: interior bins hold
    # A^2/2 (doubled by scipy), DC and Nyquist hold A^2.
    amp = np.sqrt(2.0 * ps)
    amp[0] = np.sqrt(ps[0])
    if nperseg % 2 == 0:
        amp[-1] = np.sqrt(ps[-1])
    with open(dst, 'w') as out:
        for a, b, c in zip(f, np.sqrt(pd), amp):
            out.write('%r %r %r\n' % (float(a), float(b), float(c)))
)PY";

TEST_F(SpectrumTest, WelchMatchesScipyForSeveralSegmentations) {
  struct Case {
    std::size_t n, segment;
    double overlap, rate;
  };
  // Power-of-two and other segment lengths, with and without overlap,
  // odd segment length (no Nyquist bin), and a series shorter than the
  // requested segment (one segment of the whole series).
  const std::vector<Case> cases = {
      Case{5000, 256, 0.5, 10.0}, Case{4321, 100, 0.5, 100.0},
      Case{3000, 333, 0.0, 20.0}, Case{3000, 512, 0.75, 10.0},
      Case{700, 1024, 0.5, 10.0}};
  std::vector<Spectrum> ours;
  std::vector<std::vector<double>> inputs;
  for (const Case& c : cases) {
    const std::vector<double> x = TestSignal(c.n, c.n + c.segment);
    SpectrumOptions options;
    options.sample_rate_hz = c.rate;
    options.segment_length = c.segment;
    options.overlap = c.overlap;
    ours.push_back(AmplitudeSpectrum(x, options));
    const std::size_t m = std::min(c.segment, c.n);
    EXPECT_EQ(ours.back().segment_length, m);
    const std::size_t noverlap =
        static_cast<std::size_t>(std::floor(c.overlap * static_cast<double>(m)));
    std::vector<double> input = {c.rate, static_cast<double>(m),
                                 static_cast<double>(noverlap)};
    input.insert(input.end(), x.begin(), x.end());
    inputs.push_back(input);
  }
  const std::vector<std::vector<double>> refs = RunPython(kScipyWelch, inputs);
  for (std::size_t i = 0; i < cases.size(); ++i) {
    const Case& c = cases[i];
    const Spectrum& s = ours[i];
    const std::vector<double>& ref = refs[i];
    ASSERT_TRUE(s.usable) << s.message;
    ASSERT_EQ(ref.size(), 3 * s.frequency_hz.size()) << "segment " << c.segment;
    double scale_d = 0.0, scale_a = 0.0;
    for (std::size_t k = 0; k < s.frequency_hz.size(); ++k) {
      scale_d = std::max(scale_d, ref[3 * k + 1]);
      scale_a = std::max(scale_a, ref[3 * k + 2]);
    }
    for (std::size_t k = 0; k < s.frequency_hz.size(); ++k) {
      ASSERT_NEAR(s.frequency_hz[k], ref[3 * k], 1e-12 * c.rate) << k;
      ASSERT_NEAR(s.density[k], ref[3 * k + 1], kWelchRelTol * scale_d)
          << "segment " << c.segment << " bin " << k;
      ASSERT_NEAR(s.amplitude[k], ref[3 * k + 2], kWelchRelTol * scale_a)
          << "segment " << c.segment << " bin " << k;
    }
  }
}

// A sinusoid A cos(2 pi f t + phi) with f on bin k (2 <= k <= m/2 - 2) reads
// exactly A: the periodic Hann window's transform is zero beyond bin +-1
// (Harris 1978, "On the use of windows for harmonic analysis with the
// discrete Fourier transform", Proc. IEEE 66:51), so the negative-frequency
// image does not leak into bin k, and X_k = (A/2) e^{i phi} sum w.
TEST_F(SpectrumTest, OnBinSinusoidReadsItsAmplitude) {
  const double rate = 10.0, amplitude = 3.7;
  const std::size_t m = 512, k = 41;
  const double f = static_cast<double>(k) * rate / m;
  std::vector<double> x(8 * m);
  for (std::size_t i = 0; i < x.size(); ++i) {
    x[i] = 50000.0 + amplitude * std::cos(2 * kPi * f * i / rate + 0.3);
  }
  SpectrumOptions options;
  options.sample_rate_hz = rate;
  options.segment_length = m;
  const Spectrum s = AmplitudeSpectrum(x, options);
  ASSERT_TRUE(s.usable);
  // The 50000 nT offset is removed per segment; what is left is round-off
  // of 50000 * eps * sqrt(m) ~ 3e-10 nT per bin: 1e-8 nT.
  EXPECT_NEAR(s.amplitude[k], amplitude, 1e-8);
  EXPECT_NEAR(s.amplitude[k + 3], 0.0, 1e-8);
  EXPECT_NEAR(s.frequency_hz[k], f, 1e-12);
}

// White noise of standard deviation sigma has the one-sided density
// sigma^2 / (rate / 2) (Parseval); the mean of density^2 over interior bins
// estimates it. With 1e5 samples, m = 1024 (about 195 segments, 511 bins),
// the estimate's relative standard error is far below 1 %: 3 % tolerance.
TEST_F(SpectrumTest, WhiteNoiseDensityFollowsParseval) {
  const double rate = 20.0, sigma = 0.05;
  std::mt19937_64 engine(42);
  std::vector<double> x(100000);
  for (auto& v : x) {
    const double u1 = (static_cast<double>(engine() >> 11) + 0.5) * 0x1.0p-53;
    const double u2 = (static_cast<double>(engine() >> 11) + 0.5) * 0x1.0p-53;
    v = sigma * std::sqrt(-2 * std::log(u1)) * std::cos(2 * kPi * u2);
  }
  SpectrumOptions options;
  options.sample_rate_hz = rate;
  const Spectrum s = AmplitudeSpectrum(x, options);
  ASSERT_TRUE(s.usable);
  double mean_d2 = 0.0;
  for (std::size_t k = 1; k + 1 < s.density.size(); ++k) {
    mean_d2 += s.density[k] * s.density[k];
  }
  mean_d2 /= static_cast<double>(s.density.size() - 2);
  EXPECT_NEAR(mean_d2 / (sigma * sigma / (rate / 2)), 1.0, 0.03);
}

TEST_F(SpectrumTest, SegmentsWithNonFiniteSamplesAreSkipped) {
  std::vector<double> x = TestSignal(4096, 3);
  x[1000] = std::numeric_limits<double>::quiet_NaN();
  SpectrumOptions options;
  options.segment_length = 512;  // step 256: segments start 0, 256, ...
  const Spectrum s = AmplitudeSpectrum(x, options);
  ASSERT_TRUE(s.usable);
  // Sample 1000 lies in the segments starting at 512 and 768.
  EXPECT_EQ(s.segments_skipped, 2u);
  EXPECT_EQ(s.segments_used, 15u - 2u);
  for (double v : s.density) EXPECT_TRUE(std::isfinite(v));
  EXPECT_NE(s.message.find("skipped"), std::string::npos);

  std::vector<double> all_bad(100, std::numeric_limits<double>::infinity());
  const Spectrum bad = AmplitudeSpectrum(all_bad, options);
  EXPECT_FALSE(bad.usable);
  EXPECT_TRUE(bad.density.empty());
  EXPECT_FALSE(AmplitudeSpectrum({1.0}, options).usable);
}

TEST_F(SpectrumTest, ShortDropoutsAreBridgedWhenAsked) {
  const std::vector<double> clean = TestSignal(4096, 9);
  std::vector<double> holed = clean;
  holed[1000] = std::numeric_limits<double>::quiet_NaN();
  holed[2000] = holed[2001] = std::numeric_limits<double>::infinity();
  holed[3000] = holed[3001] = holed[3002] = std::numeric_limits<double>::quiet_NaN();
  // The expected series: straight lines across the bridged runs (by hand).
  std::vector<double> expected = clean;
  expected[1000] = 0.5 * (clean[999] + clean[1001]);
  expected[2000] = clean[1999] + (clean[2002] - clean[1999]) / 3.0;
  expected[2001] = clean[1999] + 2.0 * (clean[2002] - clean[1999]) / 3.0;
  SpectrumOptions options;
  options.segment_length = 512;
  options.fill_gaps_up_to = 2;  // the run of three at 3000 stays a gap
  const Spectrum s = AmplitudeSpectrum(holed, options);
  EXPECT_EQ(s.samples_bridged, 3u);
  EXPECT_EQ(s.segments_skipped, 2u);  // the two segments over 3000..3002
  // Same as the spectrum of the hand-bridged series with that run removed
  // the same way (identical arithmetic except the interpolation: 1e-12).
  expected[3000] = expected[3001] = expected[3002] = std::numeric_limits<double>::quiet_NaN();
  SpectrumOptions plain = options;
  plain.fill_gaps_up_to = 0;
  const Spectrum ref = AmplitudeSpectrum(expected, plain);
  ASSERT_EQ(ref.segments_used, s.segments_used);
  for (std::size_t k = 0; k < s.density.size(); ++k) {
    EXPECT_NEAR(s.density[k], ref.density[k], 1e-12 * (1.0 + ref.density[k]));
  }
  // Leading and trailing runs have no two neighbours: never bridged.
  std::vector<double> edges = clean;
  edges[0] = edges[4095] = std::numeric_limits<double>::quiet_NaN();
  EXPECT_EQ(AmplitudeSpectrum(edges, options).samples_bridged, 0u);
}

TEST_F(SpectrumTest, InvalidOptionsAreRejected) {
  SpectrumOptions options;
  std::string error;
  EXPECT_TRUE(options.IsValid(&error));
  options.sample_rate_hz = 0.0;
  EXPECT_FALSE(options.IsValid(&error));
  EXPECT_NE(error.find("sample_rate_hz"), std::string::npos);
  EXPECT_THROW(AmplitudeSpectrum({1, 2, 3}, options), std::invalid_argument);
  options = SpectrumOptions();
  options.overlap = 1.0;
  EXPECT_FALSE(options.IsValid(&error));
  options = SpectrumOptions();
  options.segment_length = 1;
  EXPECT_FALSE(options.IsValid(&error));
  options = SpectrumOptions();
  options.sample_rate_hz = std::numeric_limits<double>::quiet_NaN();
  EXPECT_FALSE(options.IsValid(&error));
}

}  // namespace
}  // namespace fluxtrim::core
