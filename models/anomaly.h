#pragma once
// Fields from outside the platform, and band-limited random processes, for
// the simulator: geology along the track, buried dipoles, diurnal
// variation. All random elements take a models::Random, so they repeat
// exactly for a given seed.

#include <limits>
#include <vector>

#include "models/fluxgate_sensor.h"  // Vec3
#include "models/random.h"

namespace fluxtrim::models {

// Zero-mean random process with a flat spectrum between low_hz and high_hz,
// made by spectral synthesis: a sum of `components` cosines with
// frequencies drawn uniformly in the band and uniform random phases, each
// of amplitude rms * sqrt(2 / components) so that the mean square is rms^2
// (Shinozuka & Jan 1972, "Digital simulation of random processes and its
// applications", J. Sound Vib. 25:111; from memory). Being a sum of
// sinusoids it is smooth and has an exact derivative.
class BandLimitedProcess {
 public:
  BandLimitedProcess() = default;  // identically zero
  // Draws 2 * components uniforms from rng. rms = 0 gives zero (and draws
  // nothing).
  BandLimitedProcess(double rms, double low_hz, double high_hz,
                     int components, Random* rng);

  double Value(double t_s) const;
  // Value and time derivative (unit per second).
  void Evaluate(double t_s, double* value, double* rate) const;
  bool empty() const { return amplitude_.empty(); }

 private:
  std::vector<double> amplitude_, omega_, phase_;
};

// Geology: a band-limited random total-field anomaly over a horizontal
// plane, by 2-D spectral synthesis (the same method with wave vectors of
// random direction and wavelengths drawn log-uniformly in the band), held
// on the local north/east plane of the map origin so that every flight over
// the same ground sees the same map. Each component is upward-continued from
// the reference height: amplitude * exp(-|k| (alt - reference_alt)) (Blakely
// 1995, "Potential Theory in Gravity and Magnetic Applications", eq. 12.14,
// from memory); below the reference height the amplitude stays as at it
// (no downward continuation).
struct GeologyOptions {
  double rms_nT = 0.0;             // at the reference height
  double min_wavelength_m = 200.0;
  double max_wavelength_m = 5000.0;
  int components = 128;
  double reference_alt_m = 0.0;    // height of the rms, m above the ellipsoid
  // True when the values make sense; *error says why not.
  bool IsValid(const char** error) const;
};

class GeologyField {
 public:
  GeologyField() = default;  // zero everywhere
  GeologyField(const GeologyOptions& options, Random* rng);
  // Total-field anomaly (nT) at north_m, east_m (local plane of the map
  // origin) and alt_m.
  double Value(double north_m, double east_m, double alt_m) const;
  // Value and its horizontal gradient (nT/m) at the given point.
  void Evaluate(double north_m, double east_m, double alt_m, double* value,
                double* d_north, double* d_east) const;
  // Precomputes the continuation to alt_m, which makes Value at exactly
  // that height cheaper (the same result).
  void PrepareHeight(double alt_m);

 private:
  double ContinuationHeight(double alt_m) const;

  double reference_alt_m_ = 0.0;
  std::vector<double> amplitude_, kn_, ke_, k_, phase_;
  double prepared_alt_m_ = std::numeric_limits<double>::quiet_NaN();
  std::vector<double> prepared_amplitude_;
};

// Diurnal (external) variation: a slow sinusoid of the time of day plus
// band-limited micropulsations; nT, added along the main-field direction.
struct DiurnalOptions {
  double amplitude_nT = 0.0;      // of the sinusoid (half peak-to-peak)
  double period_s = 86400.0;
  double phase_deg = 0.0;         // phase at 00:00 UTC
  double micropulsation_rms_nT = 0.0;
  double micropulsation_low_hz = 1.0 / 600.0;
  double micropulsation_high_hz = 1.0 / 30.0;
};

class DiurnalVariation {
 public:
  DiurnalVariation() = default;
  DiurnalVariation(const DiurnalOptions& options, Random* rng);
  // t_s: seconds after 00:00 UTC of the simulated date.
  double Value(double t_s) const;
  // Value and time derivative (nT/s).
  void Evaluate(double t_s, double* value, double* rate) const;

 private:
  DiurnalOptions options_;
  BandLimitedProcess micropulsations_;
};

// Point dipole (a buried steel object, a pipe joint): NED position in the
// local plane of the map origin, moment in A m^2, NED components.
struct DipoleSource {
  double north_m = 0.0;
  double east_m = 0.0;
  double alt_m = 0.0;    // height of the source above the ellipsoid
  Vec3 moment_Am2;       // NED
};

// Field of the dipole (nT, NED) at the given point:
//   B = (mu0 / 4 pi) (3 (m . u) u - m) / r^3,  mu0 / 4 pi = 100 nT m / A
// (Blakely 1995, eq. 4.13, from memory). Returns zero within 1 mm of the
// source rather than an infinity.
Vec3 DipoleField(const DipoleSource& dipole, double north_m, double east_m,
                 double alt_m);

}  // namespace fluxtrim::models
