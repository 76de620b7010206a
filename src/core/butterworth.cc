#include "src/core/butterworth.h"

#include <algorithm>
#include <cmath>
#include <complex>
#include <numeric>
#include <sstream>
#include <stdexcept>

namespace fluxtrim::core {
namespace {

using Complex = std::complex<double>;

constexpr double kPi = 3.14159265358979323846;
// Tolerance for "this root is real" / "these roots are a conjugate pair",
// the default of scipy.signal's _cplxreal: 100 * machine epsilon.
constexpr double kRealTol = 100 * 2.220446049250313e-16;

bool IsReal(const Complex& z) { return z.imag() == 0.0; }

// np.poly: coefficients of prod (x - r_i), highest power first, built by
// successive convolution with [1, -r] in the order given.
std::vector<Complex> Poly(const std::vector<Complex>& roots) {
  std::vector<Complex> a{Complex(1.0, 0.0)};
  for (const Complex& r : roots) {
    std::vector<Complex> next(a.size() + 1, Complex(0.0, 0.0));
    for (std::size_t i = 0; i < a.size(); ++i) {
      next[i] += a[i];
      next[i + 1] += a[i] * (-r);
    }
    a.swap(next);
  }
  return a;
}

// scipy.signal._filter_design._cplxreal followed by concatenation
// (zc, zr): one element (positive imaginary part) per conjugate pair, sorted
// by real part then |imag|, followed by the real elements sorted.
std::vector<Complex> CplxReal(std::vector<Complex> z) {
  std::stable_sort(z.begin(), z.end(), [](const Complex& a, const Complex& b) {
    if (a.real() != b.real()) return a.real() < b.real();
    return std::abs(a.imag()) < std::abs(b.imag());
  });
  std::vector<Complex> real, zp, zn;
  for (const Complex& v : z) {
    if (std::abs(v.imag()) <= kRealTol * std::abs(v)) {
      real.emplace_back(v.real(), 0.0);
    } else if (v.imag() > 0) {
      zp.push_back(v);
    } else {
      zn.push_back(v);
    }
  }
  if (zp.size() != zn.size()) {
    throw std::logic_error("butterworth: unpaired complex root");
  }
  // Within runs of (nearly) equal real part, order by |imag| (as scipy).
  auto sort_runs = [](std::vector<Complex>* v,
                      const std::vector<Complex>& ref) {
    std::size_t start = 0;
    while (start < v->size()) {
      std::size_t stop = start + 1;
      while (stop < ref.size() && ref[stop].real() - ref[stop - 1].real() <=
                                      kRealTol * std::abs(ref[stop - 1])) {
        ++stop;
      }
      std::stable_sort(v->begin() + start, v->begin() + stop,
                       [](const Complex& a, const Complex& b) {
                         return std::abs(a.imag()) < std::abs(b.imag());
                       });
      start = stop;
    }
  };
  const std::vector<Complex> zp_ref = zp;
  sort_runs(&zp, zp_ref);
  sort_runs(&zn, zp_ref);
  std::vector<Complex> out;
  for (std::size_t i = 0; i < zp.size(); ++i) {
    if (std::abs(zp[i] - std::conj(zn[i])) > kRealTol * std::abs(zn[i])) {
      throw std::logic_error("butterworth: complex root without conjugate");
    }
    out.push_back((zp[i] + std::conj(zn[i])) / 2.0);
  }
  out.insert(out.end(), real.begin(), real.end());
  return out;
}

// Index of the element of `from` nearest to `to` that is real / complex /
// anything (scipy's _nearest_real_complex_idx).
enum class Which { kReal, kComplex, kAny };
std::size_t NearestIndex(const std::vector<Complex>& from, const Complex& to,
                         Which which) {
  std::size_t best = from.size();
  double best_d = 0;
  for (std::size_t i = 0; i < from.size(); ++i) {
    if (which == Which::kReal && !IsReal(from[i])) continue;
    if (which == Which::kComplex && IsReal(from[i])) continue;
    const double d = std::abs(from[i] - to);
    if (best == from.size() || d < best_d) {
      best = i;
      best_d = d;
    }
  }
  if (best == from.size()) throw std::logic_error("butterworth: no zero left");
  return best;
}

// Section from up to two zeros and two poles, gain 1 (scipy _single_zpksos).
std::array<double, 6> SingleSection(const std::vector<Complex>& z,
                                    const std::vector<Complex>& p) {
  std::array<double, 6> s{0, 0, 0, 0, 0, 0};
  const std::vector<Complex> b = Poly(z);
  const std::vector<Complex> a = Poly(p);
  for (std::size_t i = 0; i < b.size(); ++i) s[3 - b.size() + i] = b[i].real();
  for (std::size_t i = 0; i < a.size(); ++i) s[6 - a.size() + i] = a[i].real();
  return s;
}

// scipy.signal.zpk2sos(z, p, k, pairing='nearest') for a digital filter with
// as many zeros as poles and an even count (true for every band-pass).
// Poles closest to the unit circle go to the last sections; each pole pair
// takes the zeros nearest to it.
std::vector<std::array<double, 6>> ZpkToSos(std::vector<Complex> z,
                                            std::vector<Complex> p, double k) {
  const std::size_t n_sections = (std::max(p.size(), z.size()) + 1) / 2;
  z = CplxReal(z);
  p = CplxReal(p);
  auto idx_worst = [](const std::vector<Complex>& v,
                      const std::vector<std::size_t>& candidates) {
    std::size_t best = candidates.front();
    for (std::size_t i : candidates) {
      if (std::abs(1.0 - std::abs(v[i])) < std::abs(1.0 - std::abs(v[best]))) {
        best = i;
      }
    }
    return best;
  };
  auto count_real = [](const std::vector<Complex>& v) {
    return static_cast<std::size_t>(std::count_if(v.begin(), v.end(), IsReal));
  };
  std::vector<std::array<double, 6>> sos(n_sections);
  for (std::size_t si = n_sections; si-- > 0;) {
    std::vector<std::size_t> all(p.size());
    std::iota(all.begin(), all.end(), 0);
    const std::size_t p1_idx = idx_worst(p, all);
    const Complex p1 = p[p1_idx];
    p.erase(p.begin() + p1_idx);
    if (IsReal(p1) && count_real(p) == 0) {
      // Last remaining real pole: pair with the nearest real zero.
      const std::size_t z1_idx = NearestIndex(z, p1, Which::kReal);
      const Complex z1 = z[z1_idx];
      z.erase(z.begin() + z1_idx);
      sos[si] = SingleSection({z1, 0.0}, {p1, 0.0});
    } else if (p.size() + 1 == z.size() && !IsReal(p1) && count_real(p) == 1 &&
               count_real(z) == 1) {
      // One real pole and one real zero left: must take a complex zero.
      const std::size_t z1_idx = NearestIndex(z, p1, Which::kComplex);
      const Complex z1 = z[z1_idx];
      z.erase(z.begin() + z1_idx);
      sos[si] = SingleSection({z1, std::conj(z1)}, {p1, std::conj(p1)});
    } else {
      Complex p2;
      if (IsReal(p1)) {
        std::vector<std::size_t> reals;
        for (std::size_t i = 0; i < p.size(); ++i) {
          if (IsReal(p[i])) reals.push_back(i);
        }
        const std::size_t p2_idx = idx_worst(p, reals);
        p2 = p[p2_idx];
        p.erase(p.begin() + p2_idx);
      } else {
        p2 = std::conj(p1);
      }
      if (!z.empty()) {
        const std::size_t z1_idx = NearestIndex(z, p1, Which::kAny);
        const Complex z1 = z[z1_idx];
        z.erase(z.begin() + z1_idx);
        if (!IsReal(z1)) {
          sos[si] = SingleSection({z1, std::conj(z1)}, {p1, p2});
        } else if (!z.empty()) {
          const std::size_t z2_idx = NearestIndex(z, p1, Which::kReal);
          const Complex z2 = z[z2_idx];
          z.erase(z.begin() + z2_idx);
          sos[si] = SingleSection({z1, z2}, {p1, p2});
        } else {
          sos[si] = SingleSection({z1}, {p1, p2});
        }
      } else {
        sos[si] = SingleSection({}, {p1, p2});
      }
    }
  }
  for (int i = 0; i < 3; ++i) sos[0][i] *= k;
  return sos;
}

// scipy.signal.lfilter_zi for one section (a0 = 1): the state zi that solves
// zi = A zi + B, i.e. (I - companion(a)^T) zi = b[1:] - a[1:] b0.
std::array<double, 2> SectionZi(const std::array<double, 6>& s) {
  const double b0 = s[0], b1 = s[1], b2 = s[2], a1 = s[4], a2 = s[5];
  // [[1 + a1, -1], [a2, 1]] zi = [b1 - a1 b0, b2 - a2 b0]
  const double r0 = b1 - a1 * b0;
  const double r1 = b2 - a2 * b0;
  const double det = (1.0 + a1) + a2;
  const double zi0 = (r0 + r1) / det;
  const double zi1 = r1 - a2 * zi0;
  return {zi0, zi1};
}

// scipy.signal.sosfilt with initial state zi (direct form II transposed,
// section after section for each sample). zi is consumed.
void SosFilt(const std::vector<std::array<double, 6>>& sos,
             std::vector<std::array<double, 2>>* zi, double* x, std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) {
    double v = x[i];
    for (std::size_t s = 0; s < sos.size(); ++s) {
      const auto& c = sos[s];
      auto& z = (*zi)[s];
      const double y = c[0] * v + z[0];
      z[0] = c[1] * v - c[4] * y + z[1];
      z[1] = c[2] * v - c[5] * y;
      v = y;
    }
    x[i] = v;
  }
}

}  // namespace

bool BandPassOptions::IsValid(std::string* error) const {
  std::ostringstream why;
  if (order < 1 || order > 12) {
    why << "band-pass order must be 1..12, got " << order;
  } else if (!(std::isfinite(low_hz) && low_hz > 0)) {
    why << "band-pass low edge must be a positive frequency (Hz), got "
        << low_hz;
  } else if (!(std::isfinite(high_hz) && high_hz > low_hz)) {
    why << "band-pass high edge must be above the low edge (" << low_hz
        << " Hz), got " << high_hz;
  } else {
    return true;
  }
  if (error != nullptr) *error = why.str();
  return false;
}

BandPass::BandPass(const BandPassOptions& options, double sample_rate_hz) {
  std::string error;
  if (!options.IsValid(&error)) throw std::invalid_argument(error);
  if (!(std::isfinite(sample_rate_hz) && sample_rate_hz > 0)) {
    throw std::invalid_argument(
        "band-pass: sample rate must be positive, got " +
        std::to_string(sample_rate_hz));
  }
  order_ = options.order;
  rate_hz_ = sample_rate_hz;
  low_hz_ = options.low_hz;
  high_hz_ = options.high_hz;
  const double max_high = kMaxHighFraction * 0.5 * sample_rate_hz;
  if (high_hz_ > max_high) {
    high_hz_ = max_high;
    clipped_ = true;
  }
  if (!(low_hz_ < high_hz_)) {
    std::ostringstream why;
    why << "band-pass " << options.low_hz << "-" << options.high_hz
        << " Hz is empty at " << sample_rate_hz << " Hz (upper edge clipped to "
        << high_hz_ << " Hz, " << kMaxHighFraction << " x Nyquist)";
    throw std::invalid_argument(why.str());
  }

  // The steps and their order follow scipy.signal.iirfilter so that the
  // coefficients agree to rounding. Normalised edges (fraction of Nyquist),
  // pre-warped for the bilinear transform with fs = 2.
  const int n = order_;
  const double wn[2] = {2 * low_hz_ / rate_hz_, 2 * high_hz_ / rate_hz_};
  const double fs = 2.0;
  const double warped[2] = {2 * fs * std::tan(kPi * wn[0] / fs),
                            2 * fs * std::tan(kPi * wn[1] / fs)};
  // Analog Butterworth prototype: poles -exp(j pi m / 2n), m = -n+1, ..., n-1
  // step 2 (unit circle, left half plane), gain 1, no zeros.
  std::vector<Complex> p_proto;
  for (int m = -n + 1; m < n; m += 2) {
    const double theta = kPi * m / (2 * n);
    p_proto.push_back(-Complex(std::cos(theta), std::sin(theta)));
  }
  // Low-pass -> band-pass: s -> (s^2 + wo^2) / (bw s). Each pole p gives
  // p bw/2 +- sqrt((p bw/2)^2 - wo^2); n zeros go to s = 0.
  const double bw = warped[1] - warped[0];
  const double wo = std::sqrt(warped[0] * warped[1]);
  std::vector<Complex> p_bp;
  for (int sign = 0; sign < 2; ++sign) {
    for (const Complex& p : p_proto) {
      const Complex p_lp = p * (bw / 2);
      const Complex root = std::sqrt(p_lp * p_lp - wo * wo);
      p_bp.push_back(sign == 0 ? p_lp + root : p_lp - root);
    }
  }
  const double k_bp = std::pow(bw, n);
  // Bilinear transform z = (2fs + s) / (2fs - s): zeros at s = 0 map to
  // z = 1, the n zeros at infinity to z = -1.
  const double fs2 = 2 * fs;
  poles_.clear();
  Complex denom(1.0, 0.0);
  for (const Complex& p : p_bp) {
    const Complex pz = (fs2 + p) / (fs2 - p);
    poles_.push_back({pz.real(), pz.imag()});
    denom *= (fs2 - p);
  }
  zeros_real_.assign(n, 1.0);
  zeros_real_.insert(zeros_real_.end(), n, -1.0);
  gain_ = k_bp * (std::pow(fs2, n) / denom).real();

  std::vector<Complex> z, p;
  for (double v : zeros_real_) z.emplace_back(v, 0.0);
  for (const auto& v : poles_) p.emplace_back(v[0], v[1]);
  sections_ = ZpkToSos(z, p, gain_);

  // sosfilt_zi: each section's step-response steady state, scaled by the DC
  // gain of the sections before it.
  double scale = 1.0;
  zi_.clear();
  for (const auto& s : sections_) {
    const std::array<double, 2> zi = SectionZi(s);
    zi_.push_back({scale * zi[0], scale * zi[1]});
    scale *= (s[0] + s[1] + s[2]) / (s[3] + s[4] + s[5]);
  }
  // sosfiltfilt's default padlen: 3 * ntaps, ntaps = 2 * sections + 1 less
  // the sections that are really first order.
  std::size_t ntaps = 2 * sections_.size() + 1;
  std::size_t b2_zero = 0, a2_zero = 0;
  for (const auto& s : sections_) {
    b2_zero += s[2] == 0.0;
    a2_zero += s[5] == 0.0;
  }
  ntaps -= std::min(b2_zero, a2_zero);
  pad_length_ = 3 * ntaps;
}

std::size_t BandPass::min_length() const { return pad_length_ + 1; }

void BandPass::TransferFunction(std::vector<double>* b,
                                std::vector<double>* a) const {
  std::vector<Complex> z, p;
  for (double v : zeros_real_) z.emplace_back(v, 0.0);
  for (const auto& v : poles_) p.emplace_back(v[0], v[1]);
  const std::vector<Complex> bz = Poly(z);
  const std::vector<Complex> ap = Poly(p);
  b->resize(bz.size());
  a->resize(ap.size());
  // The poles come in conjugate pairs, so the imaginary parts are rounding.
  for (std::size_t i = 0; i < bz.size(); ++i) (*b)[i] = gain_ * bz[i].real();
  for (std::size_t i = 0; i < ap.size(); ++i) (*a)[i] = ap[i].real();
}

std::vector<double> BandPass::Filter(const std::vector<double>& x) const {
  std::vector<double> y(x.size());
  Filter(x.data(), x.size(), y.data());
  return y;
}

void BandPass::Filter(const double* x, std::size_t n, double* y) const {
  if (n < min_length()) {
    throw std::invalid_argument(
        "band-pass: " + std::to_string(n) + " samples is shorter than the " +
        std::to_string(min_length()) + " the zero-phase filter needs");
  }
  for (std::size_t i = 0; i < n; ++i) {
    if (!std::isfinite(x[i])) {
      throw std::invalid_argument("band-pass: sample " + std::to_string(i) +
                                  " is not finite (filter gap-free runs)");
    }
  }
  // The band-pass rejects a constant exactly (zeros at z = 1) and the
  // forward-backward filter is linear, so filtering x - x[0] gives the same
  // output. It is far better conditioned: with a 50000 nT total field at
  // 100 Hz the poles sit within 0.004 of z = 1 and rounding of the raw
  // level reaches ~1e-8 nT in the output, against ~1e-11 nT after the shift
  // (measured against a long-double filter with scipy_butterworth.py).
  const double level = x[0];
  // Odd extension (scipy.signal._arraytools.odd_ext): 2 x[0] - x[pad..1]
  // before, 2 x[n-1] - x[n-2..n-1-pad] after.
  const std::size_t pad = pad_length_;
  std::vector<double> ext(n + 2 * pad);
  for (std::size_t i = 0; i < n; ++i) ext[pad + i] = x[i] - level;
  const double first = ext[pad], last = ext[pad + n - 1];
  for (std::size_t i = 0; i < pad; ++i) {
    ext[i] = 2 * first - ext[pad + pad - i];
    ext[pad + n + i] = 2 * last - ext[pad + n - 2 - i];
  }

  std::vector<std::array<double, 2>> zi(zi_.size());
  const double x0 = ext.front();
  for (std::size_t s = 0; s < zi_.size(); ++s) {
    zi[s] = {zi_[s][0] * x0, zi_[s][1] * x0};
  }
  SosFilt(sections_, &zi, ext.data(), ext.size());
  std::reverse(ext.begin(), ext.end());
  const double y0 = ext.front();
  for (std::size_t s = 0; s < zi_.size(); ++s) {
    zi[s] = {zi_[s][0] * y0, zi_[s][1] * y0};
  }
  SosFilt(sections_, &zi, ext.data(), ext.size());
  // ext is reversed; output sample i is ext[ext.size() - 1 - (pad + i)].
  for (std::size_t i = 0; i < n; ++i) y[i] = ext[ext.size() - 1 - pad - i];
}

namespace {

// Lanes of FilterChannels: channels filtered side by side (the inner loops
// over lanes have a fixed trip count, so the compiler keeps the state in
// vector registers).
constexpr std::size_t kLanes = 8;
constexpr std::size_t kMaxSections = 12;  // order <= 12

// One sample of the section cascade on kLanes channels; per channel the
// same expressions as SosFilt. The coefficients are copied to locals and
// the pointers declared unaliased so that the lane loops vectorise.
inline void SosStepLanes(const std::vector<std::array<double, 6>>& sos,
                         double (*__restrict z)[2][kLanes],
                         double* __restrict v) {
  for (std::size_t s = 0; s < sos.size(); ++s) {
    const double b0 = sos[s][0], b1 = sos[s][1], b2 = sos[s][2];
    const double a1 = sos[s][4], a2 = sos[s][5];
    double* __restrict z0 = z[s][0];
    double* __restrict z1 = z[s][1];
    for (std::size_t l = 0; l < kLanes; ++l) {
      const double y = b0 * v[l] + z0[l];
      z0[l] = b1 * v[l] - a1 * y + z1[l];
      z1[l] = b2 * v[l] - a2 * y;
      v[l] = y;
    }
  }
}

}  // namespace

void BandPass::FilterChannels(const double* x, std::size_t n,
                              std::size_t x_stride, std::size_t channels,
                              std::size_t out_begin, std::size_t out_end,
                              double* y, std::size_t y_column_stride) const {
  if (n < min_length()) {
    throw std::invalid_argument(
        "band-pass: " + std::to_string(n) + " samples is shorter than the " +
        std::to_string(min_length()) + " the zero-phase filter needs");
  }
  if (out_begin > out_end || out_end > n) {
    throw std::invalid_argument("band-pass: output range outside the input");
  }
  if (sections_.size() > kMaxSections) {
    throw std::logic_error("band-pass: too many sections");
  }
  for (std::size_t i = 0; i < n; ++i) {
    for (std::size_t c = 0; c < channels; ++c) {
      if (!std::isfinite(x[i * x_stride + c])) {
        throw std::invalid_argument("band-pass: sample " + std::to_string(i) +
                                    " is not finite (filter gap-free runs)");
      }
    }
  }
  // Per channel this is Filter step by step: x - x[0], odd extension,
  // forward pass from the scaled steady state, backward pass likewise. The
  // extension is computed on the fly; the forward output is kept in y for
  // the wanted samples (the backward pass then overwrites it in place) and
  // in a small side buffer for the rest; the backward pass stops at the
  // first wanted sample.
  const std::size_t pad = pad_length_;
  const std::size_t len = n + 2 * pad;
  const std::size_t ns = sections_.size();
  const std::size_t keep_begin = pad + out_begin;  // forward rows kept in y
  const std::size_t keep_end = pad + out_end;
  std::vector<double> side((keep_begin + len - keep_end) * kLanes);
  auto side_row = [&](std::size_t e) {
    return side.data() + (e < keep_begin ? e : e - (keep_end - keep_begin)) * kLanes;
  };
  for (std::size_t c0 = 0; c0 < channels; c0 += kLanes) {
    const std::size_t lanes = std::min(kLanes, channels - c0);
    double level[kLanes] = {}, first[kLanes] = {}, last[kLanes] = {};
    for (std::size_t l = 0; l < lanes; ++l) {
      level[l] = x[c0 + l];
      first[l] = x[c0 + l] - level[l];
      last[l] = x[(n - 1) * x_stride + c0 + l] - level[l];
    }
    // Extended input sample e (odd extension of x - level), as Filter.
    auto input = [&](std::size_t e, double* v) {
      for (std::size_t l = lanes; l < kLanes; ++l) v[l] = 0.0;
      if (e < pad) {
        const double* row = x + (pad - e) * x_stride + c0;
        for (std::size_t l = 0; l < lanes; ++l) {
          v[l] = 2 * first[l] - (row[l] - level[l]);
        }
      } else if (e < pad + n) {
        const double* row = x + (e - pad) * x_stride + c0;
        for (std::size_t l = 0; l < lanes; ++l) v[l] = row[l] - level[l];
      } else {
        const double* row = x + (n - 2 - (e - pad - n)) * x_stride + c0;
        for (std::size_t l = 0; l < lanes; ++l) {
          v[l] = 2 * last[l] - (row[l] - level[l]);
        }
      }
    };
    double z[kMaxSections][2][kLanes];
    double v[kLanes];
    // Forward.
    input(0, v);
    for (std::size_t s = 0; s < ns; ++s) {
      for (std::size_t l = 0; l < kLanes; ++l) {
        z[s][0][l] = zi_[s][0] * v[l];
        z[s][1][l] = zi_[s][1] * v[l];
      }
    }
    for (std::size_t e = 0; e < len; ++e) {
      input(e, v);
      SosStepLanes(sections_, z, v);
      if (e >= keep_begin && e < keep_end) {
        double* out = y + c0 * y_column_stride + (e - keep_begin);
        for (std::size_t l = 0; l < lanes; ++l) out[l * y_column_stride] = v[l];
      } else {
        double* row = side_row(e);
        for (std::size_t l = 0; l < kLanes; ++l) row[l] = v[l];
      }
    }
    // Backward: step j filters forward sample e = len-1-j and yields output
    // sample e - pad (in place where it is wanted). v holds the last forward
    // sample.
    for (std::size_t s = 0; s < ns; ++s) {
      for (std::size_t l = 0; l < kLanes; ++l) {
        z[s][0][l] = zi_[s][0] * v[l];
        z[s][1][l] = zi_[s][1] * v[l];
      }
    }
    for (std::size_t e = len; e-- > keep_begin;) {
      double* out = nullptr;
      if (e < keep_end) {
        out = y + c0 * y_column_stride + (e - keep_begin);
        for (std::size_t l = 0; l < lanes; ++l) v[l] = out[l * y_column_stride];
        for (std::size_t l = lanes; l < kLanes; ++l) v[l] = 0.0;
      } else {
        const double* row = side_row(e);
        for (std::size_t l = 0; l < kLanes; ++l) v[l] = row[l];
      }
      SosStepLanes(sections_, z, v);
      if (out) {
        for (std::size_t l = 0; l < lanes; ++l) out[l * y_column_stride] = v[l];
      }
    }
  }
}

std::vector<double> BandPass::FilterWithGaps(const std::vector<double>& x,
                                             std::size_t* unfiltered) const {
  std::vector<double> y(x.size(), std::nan(""));
  std::size_t skipped = 0;
  std::size_t i = 0;
  while (i < x.size()) {
    if (!std::isfinite(x[i])) {
      ++skipped;
      ++i;
      continue;
    }
    std::size_t j = i;
    while (j < x.size() && std::isfinite(x[j])) ++j;
    if (j - i >= min_length()) {
      Filter(x.data() + i, j - i, y.data() + i);
    } else {
      skipped += j - i;
    }
    i = j;
  }
  if (unfiltered != nullptr) *unfiltered = skipped;
  return y;
}

}  // namespace fluxtrim::core

namespace fluxtrim::core {

CausalBandPass::CausalBandPass(const BandPass& band_pass, std::size_t channels)
    : sections_(band_pass.sections()),
      channels_(channels),
      level_(channels, 0.0),
      state_(channels * band_pass.sections().size() * 2, 0.0) {}

void CausalBandPass::Reset() {
  samples_ = 0;
  std::fill(state_.begin(), state_.end(), 0.0);
}

void CausalBandPass::Step(const double* x, double* y) {
  if (samples_ == 0) std::copy(x, x + channels_, level_.begin());
  ++samples_;
  const std::size_t ns = sections_.size();
  for (std::size_t ch = 0; ch < channels_; ++ch) {
    double v = x[ch] - level_[ch];
    double* z = state_.data() + ch * ns * 2;
    for (std::size_t s = 0; s < ns; ++s, z += 2) {
      const auto& c = sections_[s];
      const double out = c[0] * v + z[0];
      z[0] = c[1] * v - c[4] * out + z[1];
      z[1] = c[2] * v - c[5] * out;
      v = out;
    }
    y[ch] = v;
  }
}

}  // namespace fluxtrim::core
