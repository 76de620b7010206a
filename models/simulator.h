#pragma once
// Platform simulator: the physics of a magnetometer on a moving platform,
// free of file formats (src/core/scenario.h turns scenario files into a
// SimulatorConfig and the result into tables).
//
// At plan time t (s from the start of the maneuver plan):
//   1. The plan (models/maneuver_plan.h) gives attitude, Euler rates,
//      course and speed; band-limited turbulence is added to roll, pitch
//      and heading. The track integrates speed along the course on the
//      local plane of the map origin (flat-earth approximation: north and
//      east metres scaled by the WGS84 meridian and prime-vertical radii of
//      curvature at the origin; good to well under a metre over the tens of
//      kilometres of a survey block). Altitude stays at start_alt_m.
//   2. Ambient field, NED, nT:
//        B = W + (g + d) e + sum dipoles,   e = W / |W|
//      W the WMM2025 main field at the position and date (or a fixed field),
//      g the geology anomaly, d the diurnal variation, both taken along the
//      main-field direction (the total-field anomaly approximation).
//   3. Body frame: b = C_bn B (models/attitude.h) and its time derivative
//        b' = -w x b + C_bn B',
//      w the body rate from the Euler rates (exact). B' along the track:
//      geology and diurnal terms analytically (gradient . velocity, time
//      derivative), the main field and dipoles by a central difference over
//      +-kAmbientStep_s (error (w h)^2 / 6 relative for a feature passed at
//      angular frequency w: below 1e-5 for every scenario here), and the
//      turning of the main-field direction e' = (W' - e (e.W')) / |W|.
//   4. Platform field at the sensor, body frame, nT:
//        h = p + M b + E b' + sum_k I_k(t) g_k
//      p permanent (nT), M induced (dimensionless; h_i = sum_j M_ij b_j),
//      E eddy (s), I_k the true current of source k (A) and g_k its coupling
//      (nT/A). Induced and eddy respond to the ambient field (the soft iron
//      and the skin do not know which part comes from the core).
//   5. Sensors: the fluxgate reads SensorRaw(cal, b + h, temperature) plus
//      white noise on each axis (models/fluxgate_sensor.h); the scalar
//      sensor at sample time t reads |b + h| at t - lag plus white noise and
//      spikes.
// Random elements draw from separate seeded streams (models/random.h), so a
// seed reproduces a simulation exactly.

#include <cstddef>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "models/anomaly.h"
#include "models/attitude.h"
#include "models/fluxgate_sensor.h"
#include "models/maneuver_plan.h"

namespace fluxtrim::models {

// A current-carrying circuit (motors, battery leads, avionics) whose field
// at the sensor is its current times a body-fixed coupling vector. The true
// current follows the platform's work:
//   I(t) = base_A + tilt_gain_A (1 / cos(tilt) - 1) + rate_gain_A_s |w|
//          + fluctuation(t)
// (tilt: angle of the body z axis from the vertical; |w|: body angular rate
// magnitude, rad/s; fluctuation: band-limited, BandLimitedProcess). The
// logged channel adds white noise of noise_rms_A.
struct CurrentSource {
  std::string name;
  Vec3 coupling_nT_per_A;
  double base_A = 0.0;
  double tilt_gain_A = 0.0;
  double rate_gain_A_s = 0.0;  // A per rad/s
  double fluctuation_rms_A = 0.0;
  double fluctuation_low_hz = 0.05;
  double fluctuation_high_hz = 1.0;
  double noise_rms_A = 0.0;
};

struct PlatformField {
  Vec3 permanent_nT;
  Mat3 induced;  // dimensionless, h_i = sum_j induced.m[i][j] b_j
  Mat3 eddy_s;   // s, h_i = sum_j eddy_s.m[i][j] db_j/dt
  std::vector<CurrentSource> currents;
};

struct TurbulenceOptions {
  double roll_rms = 0.0;     // rad
  double pitch_rms = 0.0;    // rad
  double heading_rms = 0.0;  // rad
  double low_hz = 0.05;
  double high_hz = 0.5;
  int components = 32;
};

struct EnvironmentOptions {
  // WMM2025 main field; when false, fixed_field_ned_nT everywhere (tests,
  // laboratory set-ups).
  bool main_field = true;
  Vec3 fixed_field_ned_nT = {20000.0, 0.0, 45000.0};
  // Origin of the local north/east plane of geology and dipoles; NaN: the
  // start point.
  double map_origin_lat_deg = std::numeric_limits<double>::quiet_NaN();
  double map_origin_lon_deg = std::numeric_limits<double>::quiet_NaN();
  GeologyOptions geology;
  std::uint64_t geology_seed = 0;  // used when has_geology_seed
  bool has_geology_seed = false;
  DiurnalOptions diurnal;
  std::uint64_t diurnal_seed = 0;  // used when has_diurnal_seed
  bool has_diurnal_seed = false;
  std::vector<DipoleSource> dipoles;  // positions on the local plane
};

struct FluxgateOptions {
  SensorCalibration errors;   // true sensor errors (forward model)
  double noise_rms_nT = 0.0;  // white, each axis
};

struct ScalarOptions {
  bool present = true;
  double noise_rms_nT = 0.0;  // white
  double lag_s = 0.0;         // the sample at t reads the field at t - lag_s
};

struct TemperatureOptions {
  bool logged = false;  // adds a temperature channel
  double start_c = 20.0;
  double drift_c_per_h = 0.0;
  double noise_rms_c = 0.0;  // of the logged channel
};

struct Dropout {
  enum class Kind { kNanRun, kTimeGap };
  enum class Channels { kScalar, kFluxgate, kAll };
  Kind kind = Kind::kNanRun;
  Channels channels = Channels::kAll;  // kNanRun only
  int count = 1;                 // random placements (when at_s is empty)
  double duration_s = 1.0;
  std::vector<double> at_s;      // explicit starts, s from the first sample
};

struct FaultOptions {
  double spike_fraction = 0.0;     // of samples
  double spike_amplitude_nT = 50.0;
  bool spikes_on_fluxgate = false;  // false: on the scalar sensor
  std::vector<Dropout> dropouts;
};

struct SimulatorConfig {
  double sample_rate_hz = 10.0;
  // Time of the first sample, s after 00:00 UTC of the date; the recorded
  // time channel is start_time_s + plan time.
  double start_time_s = 0.0;
  // Decimal year at 00:00 UTC of the date and the length of that year (for
  // the secular variation of the main field).
  double decimal_year_at_midnight = 2025.5;
  double year_length_days = 365.0;
  double start_lat_deg = 0.0;
  double start_lon_deg = 0.0;
  double start_alt_m = 0.0;  // above the WGS84 ellipsoid
  ManeuverPlan plan;
  TurbulenceOptions turbulence;
  PlatformField platform;
  FluxgateOptions fluxgate;
  ScalarOptions scalar;
  double attitude_noise_rad = 0.0;  // white, on each logged angle
  TemperatureOptions temperature;
  EnvironmentOptions environment;
  FaultOptions faults;
  std::uint64_t seed = 1;
  // Largest number of samples accepted: a memory guard (the result and
  // the tables built from it hold about 0.5 kB per sample, so 4 million
  // samples, e.g. 111 h at 10 Hz, take about 2 GB).
  std::size_t max_samples = 4000000;

  // Checks ranges; on failure *error says which value and what was
  // expected.
  bool IsValid(std::string* error) const;
};

// Everything at one instant.
struct PhysicsState {
  double plan_time_s = 0.0;
  PlanState plan;        // attitude including turbulence
  Vec3 body_rate;        // w, rad/s, body axes
  double north_m = 0.0;  // on the local plane of the map origin
  double east_m = 0.0;
  double lat_deg = 0.0, lon_deg = 0.0, alt_m = 0.0;
  Vec3 earth_ned;        // main field, nT
  Vec3 ambient_ned;      // main + geology + diurnal + dipoles, nT
  Vec3 ambient_ned_rate; // nT/s
  double geology_nT = 0.0;  // geology + dipoles along the main field
  double diurnal_nT = 0.0;
  Vec3 earth_body;          // nT
  Vec3 ambient_body;        // nT
  Vec3 ambient_body_rate;   // nT/s
  Vec3 platform_body;       // h, nT
  Vec3 total_body;          // ambient + platform, nT
  double tilt = 0.0;        // rad, body z from vertical
  std::vector<double> currents_A;  // true currents
};

// One maneuver as flown; times are plan times (s).
struct ManeuverTruth {
  double start_s = 0.0;
  double end_s = 0.0;
  double heading = 0.0;  // rad, reference heading, wrapped to [0, 2 pi)
  ManeuverKind kind = ManeuverKind::kNone;
};

// Per-sample series, all of the same length. Angles in degrees where the
// name says so.
struct SimulationResult {
  std::vector<double> time_s;  // start_time_s + plan time
  std::vector<double> lat_deg, lon_deg, alt_m;
  std::vector<double> roll_deg, pitch_deg, heading_deg;  // logged (noisy);
                                                         // heading [0, 360)
  std::vector<Vec3> fluxgate_nT;  // raw reading; NaN in dropouts
  std::vector<double> scalar_nT;  // NaN when absent or in dropouts
  std::vector<std::vector<double>> currents_A;  // [source][sample], logged
  std::vector<double> temperature_c;            // logged (when logged)
  // Truth.
  std::vector<double> f_interference_true, f_ambient, f_earth, f_geology,
      f_diurnal, noise_f, spike_f;
  std::vector<Vec3> earth_body_nT;
  std::vector<Vec3> ambient_body_nT;
  std::vector<Vec3> ambient_body_rate_nT_s;
  std::vector<Vec3> platform_body_nT;
  std::vector<int> maneuver_kind;
  std::vector<double> maneuver_heading_deg;  // NaN outside maneuvers
  std::vector<ManeuverTruth> maneuvers;
  std::size_t removed_samples = 0;  // by time-gap dropouts
};

class PlatformSimulator {
 public:
  // Central-difference step for the ambient field's rate, s.
  static constexpr double kAmbientStep_s = 0.01;

  // Throws std::invalid_argument with the message of IsValid.
  explicit PlatformSimulator(const SimulatorConfig& config);

  std::size_t sample_count() const { return samples_; }
  const SimulatorConfig& config() const { return config_; }

  // Noise-free physics at plan time t_s (any t: outside the plan the end
  // states continue).
  PhysicsState Evaluate(double t_s) const;

  // All samples, with noise, spikes and dropouts.
  SimulationResult Run() const;

 private:
  void TrackAt(double t, double* north_m, double* east_m) const;
  Vec3 MainAndDipoles(double t, double north_m, double east_m,
                      Vec3* main) const;
  Vec3 TrackVelocity(double t) const;

  SimulatorConfig config_;
  std::size_t samples_ = 0;
  double dt_s_ = 0.1;
  double origin_lat_deg_ = 0.0, origin_lon_deg_ = 0.0;
  double meridian_radius_m_ = 0.0, parallel_radius_m_ = 0.0;
  BandLimitedProcess turbulence_[3];
  std::vector<BandLimitedProcess> current_fluctuations_;
  GeologyField geology_;  // continued to start_alt_m
  DiurnalVariation diurnal_;
  std::vector<double> track_north_m_, track_east_m_;
};

SimulationResult Simulate(const SimulatorConfig& config);

}  // namespace fluxtrim::models
