#include "models/anomaly.h"

#include <cmath>

#include "models/attitude.h"

namespace fluxtrim::models {
namespace {

constexpr double kTwoPi = 6.283185307179586476925;

}  // namespace

BandLimitedProcess::BandLimitedProcess(double rms, double low_hz,
                                       double high_hz, int components,
                                       Random* rng) {
  if (!(rms > 0) || components <= 0) return;
  const double a = rms * std::sqrt(2.0 / components);
  for (int k = 0; k < components; ++k) {
    const double f = rng->Uniform(low_hz, high_hz);
    const double phase = kTwoPi * rng->Uniform();
    amplitude_.push_back(a);
    omega_.push_back(kTwoPi * f);
    phase_.push_back(phase);
  }
}

double BandLimitedProcess::Value(double t) const {
  double v = 0.0;
  for (std::size_t k = 0; k < amplitude_.size(); ++k) {
    v += amplitude_[k] * std::cos(omega_[k] * t + phase_[k]);
  }
  return v;
}

void BandLimitedProcess::Evaluate(double t, double* value,
                                  double* rate) const {
  double v = 0.0, r = 0.0;
  for (std::size_t k = 0; k < amplitude_.size(); ++k) {
    const double arg = omega_[k] * t + phase_[k];
    v += amplitude_[k] * std::cos(arg);
    r -= amplitude_[k] * omega_[k] * std::sin(arg);
  }
  *value = v;
  *rate = r;
}

bool GeologyOptions::IsValid(const char** error) const {
  if (!(rms_nT >= 0) || !std::isfinite(rms_nT)) {
    *error = "rms_nT must be finite and >= 0";
    return false;
  }
  if (!(min_wavelength_m > 0) || !(max_wavelength_m >= min_wavelength_m) ||
      !std::isfinite(max_wavelength_m)) {
    *error = "wavelengths must satisfy 0 < min_wavelength_m <= "
             "max_wavelength_m";
    return false;
  }
  if (components < 1 || components > 100000) {
    *error = "components must be between 1 and 100000";
    return false;
  }
  if (!std::isfinite(reference_alt_m)) {
    *error = "reference_alt_m must be finite";
    return false;
  }
  return true;
}

GeologyField::GeologyField(const GeologyOptions& o, Random* rng)
    : reference_alt_m_(o.reference_alt_m) {
  if (!(o.rms_nT > 0)) return;
  const double a = o.rms_nT * std::sqrt(2.0 / o.components);
  const double log_min = std::log(o.min_wavelength_m);
  const double log_max = std::log(o.max_wavelength_m);
  for (int c = 0; c < o.components; ++c) {
    const double wavelength = std::exp(rng->Uniform(log_min, log_max));
    const double direction = kTwoPi * rng->Uniform();
    const double phase = kTwoPi * rng->Uniform();
    const double k = kTwoPi / wavelength;
    amplitude_.push_back(a);
    kn_.push_back(k * std::cos(direction));
    ke_.push_back(k * std::sin(direction));
    k_.push_back(k);
    phase_.push_back(phase);
  }
}

double GeologyField::ContinuationHeight(double alt_m) const {
  return alt_m > reference_alt_m_ ? alt_m - reference_alt_m_ : 0.0;
}

void GeologyField::PrepareHeight(double alt_m) {
  const double up = ContinuationHeight(alt_m);
  prepared_amplitude_.resize(amplitude_.size());
  for (std::size_t c = 0; c < amplitude_.size(); ++c) {
    prepared_amplitude_[c] = amplitude_[c] * std::exp(-k_[c] * up);
  }
  prepared_alt_m_ = alt_m;
}

double GeologyField::Value(double north_m, double east_m,
                           double alt_m) const {
  double v = 0.0;
  if (alt_m == prepared_alt_m_) {
    for (std::size_t c = 0; c < amplitude_.size(); ++c) {
      v += prepared_amplitude_[c] *
           std::cos(kn_[c] * north_m + ke_[c] * east_m + phase_[c]);
    }
    return v;
  }
  const double up = ContinuationHeight(alt_m);
  for (std::size_t c = 0; c < amplitude_.size(); ++c) {
    v += amplitude_[c] * std::exp(-k_[c] * up) *
         std::cos(kn_[c] * north_m + ke_[c] * east_m + phase_[c]);
  }
  return v;
}

void GeologyField::Evaluate(double north_m, double east_m, double alt_m,
                            double* value, double* d_north,
                            double* d_east) const {
  const bool prepared = alt_m == prepared_alt_m_;
  const double up = ContinuationHeight(alt_m);
  double v = 0.0, gn = 0.0, ge = 0.0;
  for (std::size_t c = 0; c < amplitude_.size(); ++c) {
    const double a = prepared ? prepared_amplitude_[c]
                              : amplitude_[c] * std::exp(-k_[c] * up);
    const double arg = kn_[c] * north_m + ke_[c] * east_m + phase_[c];
    const double cs = std::cos(arg), sn = std::sin(arg);
    v += a * cs;
    gn -= a * kn_[c] * sn;
    ge -= a * ke_[c] * sn;
  }
  *value = v;
  *d_north = gn;
  *d_east = ge;
}

DiurnalVariation::DiurnalVariation(const DiurnalOptions& options,
                                   Random* rng)
    : options_(options),
      micropulsations_(options.micropulsation_rms_nT,
                       options.micropulsation_low_hz,
                       options.micropulsation_high_hz, 16, rng) {}

double DiurnalVariation::Value(double t) const {
  double v = micropulsations_.Value(t);
  if (options_.amplitude_nT != 0.0 && options_.period_s > 0) {
    v += options_.amplitude_nT *
         std::sin(kTwoPi * t / options_.period_s +
                  options_.phase_deg * (kTwoPi / 360.0));
  }
  return v;
}

void DiurnalVariation::Evaluate(double t, double* value, double* rate) const {
  double v = 0.0, r = 0.0;
  micropulsations_.Evaluate(t, &v, &r);
  if (options_.amplitude_nT != 0.0 && options_.period_s > 0) {
    const double w = kTwoPi / options_.period_s;
    const double arg = w * t + options_.phase_deg * (kTwoPi / 360.0);
    v += options_.amplitude_nT * std::sin(arg);
    r += options_.amplitude_nT * w * std::cos(arg);
  }
  *value = v;
  *rate = r;
}

Vec3 DipoleField(const DipoleSource& d, double north_m, double east_m,
                 double alt_m) {
  const Vec3 r{north_m - d.north_m, east_m - d.east_m, -(alt_m - d.alt_m)};
  const double r2 = Dot(r, r);
  if (!(r2 > 1e-6)) return {};
  const double rn = std::sqrt(r2);
  const Vec3 u = (1.0 / rn) * r;
  const double mu = Dot(d.moment_Am2, u);
  constexpr double kMu0Over4Pi_nT_m_per_A = 100.0;
  const double scale = kMu0Over4Pi_nT_m_per_A / (r2 * rn);
  return scale * ((3.0 * mu) * u - d.moment_Am2);
}

}  // namespace fluxtrim::models
