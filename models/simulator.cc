#include "models/simulator.h"

#include <algorithm>
#include <cmath>
#include <stdexcept>

#include "models/random.h"
#include "models/wmm.h"

namespace fluxtrim::models {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kDegToRad = kPi / 180.0;
constexpr double kRadToDeg = 180.0 / kPi;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// WGS84 (NIMA TR8350.2, table 3.1, from memory).
constexpr double kWgs84A_m = 6378137.0;
constexpr double kWgs84F = 1.0 / 298.257223563;

bool Finite(double x) { return std::isfinite(x); }
bool FiniteVec(const Vec3& v) {
  return Finite(v.x) && Finite(v.y) && Finite(v.z);
}
bool FiniteMat(const Mat3& m) {
  for (const auto& row : m.m) {
    for (double v : row) {
      if (!Finite(v)) return false;
    }
  }
  return true;
}

double WrapDeg360(double deg) {
  double w = std::fmod(deg, 360.0);
  if (w < 0) w += 360.0;
  if (w >= 360.0) w -= 360.0;
  return w;
}

bool Fail(std::string* error, const std::string& message) {
  if (error) *error = message;
  return false;
}

bool BandValid(double low, double high) {
  return Finite(low) && Finite(high) && low >= 0 && high > low;
}

}  // namespace

bool SimulatorConfig::IsValid(std::string* error) const {
  if (!(sample_rate_hz > 0) || !(sample_rate_hz <= 100000)) {
    return Fail(error, "sample rate must be in (0, 100000] Hz");
  }
  if (!Finite(start_time_s)) return Fail(error, "start time must be finite");
  if (!Finite(decimal_year_at_midnight) || !(year_length_days >= 365) ||
      !(year_length_days <= 366)) {
    return Fail(error, "date must give a finite decimal year");
  }
  if (!(std::fabs(start_lat_deg) <= 89.0)) {
    return Fail(error, "start latitude must be within [-89, 89] deg");
  }
  if (!(std::fabs(start_lon_deg) <= 360.0)) {
    return Fail(error, "start longitude must be within [-360, 360] deg");
  }
  if (!(start_alt_m >= -1000.0) || !(start_alt_m <= 100000.0)) {
    return Fail(error, "start altitude must be within [-1000, 100000] m");
  }
  const double duration = plan.duration_s();
  if (!(duration > 0) || !Finite(duration)) {
    return Fail(error, "the maneuver plan is empty");
  }
  if (!(duration * sample_rate_hz < static_cast<double>(max_samples))) {
    return Fail(error, "the flight would have more than " +
                           std::to_string(max_samples) + " samples");
  }
  for (const PlanSegment& s : plan.segments()) {
    if (!Finite(s.course0) || !Finite(s.course1) || !Finite(s.yaw_offset0) ||
        !Finite(s.yaw_offset1) || !Finite(s.tilt0) || !Finite(s.tilt1) ||
        !Finite(s.amplitude) || !Finite(s.period_s) || !(s.speed_mps >= 0) ||
        !Finite(s.speed_mps) || !Finite(s.duration_s)) {
      return Fail(error, "the maneuver plan holds a non-finite value");
    }
  }
  const TurbulenceOptions& u = turbulence;
  if (!(u.roll_rms >= 0) || !(u.pitch_rms >= 0) || !(u.heading_rms >= 0) ||
      !Finite(u.roll_rms + u.pitch_rms + u.heading_rms)) {
    return Fail(error, "turbulence rms values must be finite and >= 0");
  }
  if (!BandValid(u.low_hz, u.high_hz)) {
    return Fail(error, "turbulence band must satisfy 0 <= low < high");
  }
  if (u.components < 1 || u.components > 10000) {
    return Fail(error, "turbulence components must be within [1, 10000]");
  }
  if (!FiniteVec(platform.permanent_nT) || !FiniteMat(platform.induced) ||
      !FiniteMat(platform.eddy_s)) {
    return Fail(error, "platform coefficients must be finite");
  }
  for (const CurrentSource& c : platform.currents) {
    if (c.name.empty()) return Fail(error, "a current source has no name");
    if (!FiniteVec(c.coupling_nT_per_A) || !Finite(c.base_A) ||
        !Finite(c.tilt_gain_A) || !Finite(c.rate_gain_A_s) ||
        !(c.fluctuation_rms_A >= 0) || !Finite(c.fluctuation_rms_A) ||
        !(c.noise_rms_A >= 0) || !Finite(c.noise_rms_A)) {
      return Fail(error, "current source '" + c.name +
                             "' has a non-finite or negative value");
    }
    if (!BandValid(c.fluctuation_low_hz, c.fluctuation_high_hz)) {
      return Fail(error, "current source '" + c.name +
                             "': fluctuation band must satisfy 0 <= low < "
                             "high");
    }
  }
  const SensorCalibration& e = fluxgate.errors;
  for (int i = 0; i < 3; ++i) {
    if (!(e.gains[i] > 0.5) || !(e.gains[i] < 2.0)) {
      return Fail(error, "fluxgate gains must be within (0.5, 2)");
    }
    if (!Finite(e.offsets_nT[i]) || !Finite(e.gain_tc_per_K[i]) ||
        !Finite(e.offset_tc_nT_per_K[i])) {
      return Fail(error, "fluxgate offsets and coefficients must be finite");
    }
    if (!(std::fabs(e.nonorthogonality_rad[i]) < 0.5) ||
        !(std::fabs(e.misalignment_rad[i]) < 0.5)) {
      return Fail(error,
                  "fluxgate angles must be smaller than 0.5 rad (28.6 deg)");
    }
  }
  if (!Finite(e.reference_temp_c)) {
    return Fail(error, "fluxgate reference temperature must be finite");
  }
  if (!(fluxgate.noise_rms_nT >= 0) || !Finite(fluxgate.noise_rms_nT) ||
      !(scalar.noise_rms_nT >= 0) || !Finite(scalar.noise_rms_nT) ||
      !(attitude_noise_rad >= 0) || !Finite(attitude_noise_rad)) {
    return Fail(error, "noise levels must be finite and >= 0");
  }
  if (!(std::fabs(scalar.lag_s) <= 10.0)) {
    return Fail(error, "scalar lag must be within [-10, 10] s");
  }
  if (!Finite(temperature.start_c) || !Finite(temperature.drift_c_per_h) ||
      !(temperature.noise_rms_c >= 0) || !Finite(temperature.noise_rms_c)) {
    return Fail(error, "temperature values must be finite, noise >= 0");
  }
  const EnvironmentOptions& env = environment;
  if (!env.main_field && !FiniteVec(env.fixed_field_ned_nT)) {
    return Fail(error, "the fixed field must be finite");
  }
  if (!env.main_field && !(Norm(env.fixed_field_ned_nT) > 0)) {
    return Fail(error, "the fixed field must not be zero");
  }
  if (!std::isnan(env.map_origin_lat_deg) &&
      !(std::fabs(env.map_origin_lat_deg) <= 89.0)) {
    return Fail(error, "map origin latitude must be within [-89, 89] deg");
  }
  if (!std::isnan(env.map_origin_lon_deg) &&
      !(std::fabs(env.map_origin_lon_deg) <= 360.0)) {
    return Fail(error, "map origin longitude must be within [-360, 360] deg");
  }
  const char* geology_error = nullptr;
  if (!env.geology.IsValid(&geology_error)) {
    return Fail(error, std::string("geology: ") + geology_error);
  }
  const DiurnalOptions& d = env.diurnal;
  if (!Finite(d.amplitude_nT) || !(d.period_s > 0) || !Finite(d.period_s) ||
      !Finite(d.phase_deg) || !(d.micropulsation_rms_nT >= 0) ||
      !Finite(d.micropulsation_rms_nT) ||
      !BandValid(d.micropulsation_low_hz, d.micropulsation_high_hz)) {
    return Fail(error, "diurnal values must be finite, the period positive "
                       "and the micropulsation band 0 <= low < high");
  }
  for (const DipoleSource& s : env.dipoles) {
    if (!Finite(s.north_m) || !Finite(s.east_m) || !Finite(s.alt_m) ||
        !FiniteVec(s.moment_Am2)) {
      return Fail(error, "dipole values must be finite");
    }
  }
  const FaultOptions& f = faults;
  if (!(f.spike_fraction >= 0) || !(f.spike_fraction <= 1) ||
      !Finite(f.spike_amplitude_nT)) {
    return Fail(error, "spike fraction must be within [0, 1] and the "
                       "amplitude finite");
  }
  for (const Dropout& o : f.dropouts) {
    if (!(o.duration_s > 0) || !Finite(o.duration_s) || o.count < 0 ||
        o.count > 1000000) {
      return Fail(error, "dropouts need a positive duration and a count "
                         "within [0, 1000000]");
    }
    for (double a : o.at_s) {
      if (!(a >= 0) || !Finite(a)) {
        return Fail(error, "dropout start times must be finite and >= 0");
      }
    }
  }
  return true;
}

PlatformSimulator::PlatformSimulator(const SimulatorConfig& config)
    : config_(config) {
  std::string error;
  if (!config_.IsValid(&error)) throw std::invalid_argument(error);
  dt_s_ = 1.0 / config_.sample_rate_hz;
  samples_ = static_cast<std::size_t>(
                 std::floor(config_.plan.duration_s() * config_.sample_rate_hz +
                            1e-9)) +
             1;

  const EnvironmentOptions& env = config_.environment;
  origin_lat_deg_ = std::isnan(env.map_origin_lat_deg)
                        ? config_.start_lat_deg
                        : env.map_origin_lat_deg;
  origin_lon_deg_ = std::isnan(env.map_origin_lon_deg)
                        ? config_.start_lon_deg
                        : env.map_origin_lon_deg;
  // Radii of curvature of the ellipsoid at the origin (e.g. Torge, Geodesy,
  // eqs. 4.15-4.16, from memory), raised by the flight height.
  const double e2 = kWgs84F * (2.0 - kWgs84F);
  const double sl = std::sin(origin_lat_deg_ * kDegToRad);
  const double w = std::sqrt(1.0 - e2 * sl * sl);
  meridian_radius_m_ =
      kWgs84A_m * (1.0 - e2) / (w * w * w) + config_.start_alt_m;
  parallel_radius_m_ = (kWgs84A_m / w + config_.start_alt_m) *
                       std::cos(origin_lat_deg_ * kDegToRad);

  Random turbulence_rng(config_.seed, RandomStream::kTurbulence);
  const TurbulenceOptions& u = config_.turbulence;
  const double rms[3] = {u.roll_rms, u.pitch_rms, u.heading_rms};
  for (int i = 0; i < 3; ++i) {
    turbulence_[i] = BandLimitedProcess(rms[i], u.low_hz, u.high_hz,
                                        u.components, &turbulence_rng);
  }
  Random current_rng(config_.seed, RandomStream::kCurrents);
  for (const CurrentSource& c : config_.platform.currents) {
    current_fluctuations_.emplace_back(c.fluctuation_rms_A,
                                       c.fluctuation_low_hz,
                                       c.fluctuation_high_hz, 32,
                                       &current_rng);
  }
  Random geology_rng(env.has_geology_seed ? env.geology_seed : config_.seed,
                     RandomStream::kGeology);
  geology_ = GeologyField(env.geology, &geology_rng);
  geology_.PrepareHeight(config_.start_alt_m);
  Random diurnal_rng(env.has_diurnal_seed ? env.diurnal_seed : config_.seed,
                     RandomStream::kDiurnal);
  diurnal_ = DiurnalVariation(env.diurnal, &diurnal_rng);

  // Track: speed along the course, integrated sample to sample with
  // Simpson's rule (exact to O(dt^5); the course is a smooth function of
  // time, not of the position).
  double lon_diff = config_.start_lon_deg - origin_lon_deg_;
  lon_diff -= 360.0 * std::round(lon_diff / 360.0);
  track_north_m_.resize(samples_);
  track_east_m_.resize(samples_);
  track_north_m_[0] =
      (config_.start_lat_deg - origin_lat_deg_) * kDegToRad * meridian_radius_m_;
  track_east_m_[0] = lon_diff * kDegToRad * parallel_radius_m_;
  for (std::size_t i = 0; i + 1 < samples_; ++i) {
    const double t0 = static_cast<double>(i) / config_.sample_rate_hz;
    const double t1 = static_cast<double>(i + 1) / config_.sample_rate_hz;
    const Vec3 v0 = TrackVelocity(t0);
    const Vec3 vm = TrackVelocity(0.5 * (t0 + t1));
    const Vec3 v1 = TrackVelocity(t1);
    const double h = (t1 - t0) / 6.0;
    track_north_m_[i + 1] = track_north_m_[i] + h * (v0.x + 4.0 * vm.x + v1.x);
    track_east_m_[i + 1] = track_east_m_[i] + h * (v0.y + 4.0 * vm.y + v1.y);
  }
}

Vec3 PlatformSimulator::TrackVelocity(double t) const {
  const PlanState p = config_.plan.Evaluate(t);
  return {p.speed_mps * std::cos(p.course), p.speed_mps * std::sin(p.course),
          0.0};
}

void PlatformSimulator::TrackAt(double t, double* north_m,
                                double* east_m) const {
  double index = std::round(t * config_.sample_rate_hz);
  index = std::clamp(index, 0.0, static_cast<double>(samples_ - 1));
  const std::size_t i = static_cast<std::size_t>(index);
  const double ti = static_cast<double>(i) / config_.sample_rate_hz;
  const double step = t - ti;
  if (step == 0.0) {
    *north_m = track_north_m_[i];
    *east_m = track_east_m_[i];
    return;
  }
  const Vec3 v0 = TrackVelocity(ti);
  const Vec3 vm = TrackVelocity(ti + 0.5 * step);
  const Vec3 v1 = TrackVelocity(t);
  const double h = step / 6.0;
  *north_m = track_north_m_[i] + h * (v0.x + 4.0 * vm.x + v1.x);
  *east_m = track_east_m_[i] + h * (v0.y + 4.0 * vm.y + v1.y);
}

// Main field (into *main) and main field plus dipoles (returned), NED.
Vec3 PlatformSimulator::MainAndDipoles(double t, double north_m,
                                       double east_m, Vec3* main) const {
  const EnvironmentOptions& env = config_.environment;
  const double alt = config_.start_alt_m;
  if (env.main_field) {
    const double lat =
        origin_lat_deg_ + north_m / meridian_radius_m_ * kRadToDeg;
    const double lon =
        origin_lon_deg_ + east_m / parallel_radius_m_ * kRadToDeg;
    const double year =
        config_.decimal_year_at_midnight +
        (config_.start_time_s + t) / (config_.year_length_days * 86400.0);
    const GeomagneticField g =
        MagneticModel::Wmm2025().Field(lat, lon, alt, year);
    *main = {g.x_nT, g.y_nT, g.z_nT};
  } else {
    *main = env.fixed_field_ned_nT;
  }
  Vec3 total = *main;
  for (const DipoleSource& s : env.dipoles) {
    total = total + DipoleField(s, north_m, east_m, alt);
  }
  return total;
}

PhysicsState PlatformSimulator::Evaluate(double t) const {
  PhysicsState s;
  s.plan_time_s = t;
  s.plan = config_.plan.Evaluate(t);
  double* angle[3] = {&s.plan.attitude.roll, &s.plan.attitude.pitch,
                      &s.plan.attitude.heading};
  double* rate[3] = {&s.plan.rates.roll, &s.plan.rates.pitch,
                     &s.plan.rates.heading};
  for (int i = 0; i < 3; ++i) {
    if (turbulence_[i].empty()) continue;
    double v, r;
    turbulence_[i].Evaluate(t, &v, &r);
    *angle[i] += v;
    *rate[i] += r;
  }
  const Attitude& att = s.plan.attitude;
  s.body_rate = BodyRate(att, s.plan.rates);
  TrackAt(t, &s.north_m, &s.east_m);
  s.lat_deg = origin_lat_deg_ + s.north_m / meridian_radius_m_ * kRadToDeg;
  s.lon_deg = origin_lon_deg_ + s.east_m / parallel_radius_m_ * kRadToDeg;
  s.lon_deg -= 360.0 * std::floor((s.lon_deg + 180.0) / 360.0);
  s.alt_m = config_.start_alt_m;
  // Ambient field B = W + (g + d) e + dipoles and its rate along the track.
  Vec3 main;
  const Vec3 main_dipoles = MainAndDipoles(t, s.north_m, s.east_m, &main);
  const double h = kAmbientStep_s;
  double n1, e1, n0, e0;
  TrackAt(t + h, &n1, &e1);
  TrackAt(t - h, &n0, &e0);
  Vec3 main1, main0;
  const Vec3 after = MainAndDipoles(t + h, n1, e1, &main1);
  const Vec3 before = MainAndDipoles(t - h, n0, e0, &main0);
  const Vec3 main_dipoles_rate = (0.5 / h) * (after - before);
  const Vec3 main_rate = (0.5 / h) * (main1 - main0);
  const double main_norm = Norm(main);
  const Vec3 unit = (1.0 / main_norm) * main;
  const Vec3 unit_rate =
      (1.0 / main_norm) * (main_rate - Dot(unit, main_rate) * unit);
  double g = 0.0, g_north = 0.0, g_east = 0.0, d = 0.0, d_rate = 0.0;
  geology_.Evaluate(s.north_m, s.east_m, s.alt_m, &g, &g_north, &g_east);
  diurnal_.Evaluate(config_.start_time_s + t, &d, &d_rate);
  const Vec3 velocity = TrackVelocity(t);
  const double g_rate = g_north * velocity.x + g_east * velocity.y;
  s.earth_ned = main;
  s.ambient_ned = main_dipoles + (g + d) * unit;
  s.ambient_ned_rate =
      main_dipoles_rate + (g_rate + d_rate) * unit + (g + d) * unit_rate;
  s.geology_nT = g + Dot(unit, main_dipoles - main);
  s.diurnal_nT = d;

  const Mat3 c = NedToBody(att);
  s.earth_body = Multiply(c, s.earth_ned);
  s.ambient_body = Multiply(c, s.ambient_ned);
  s.ambient_body_rate = Multiply(c, s.ambient_ned_rate) -
                        Cross(s.body_rate, s.ambient_body);
  const double cos_tilt = std::cos(att.roll) * std::cos(att.pitch);
  s.tilt = std::acos(std::clamp(cos_tilt, -1.0, 1.0));

  const PlatformField& p = config_.platform;
  Vec3 h_body = p.permanent_nT + Multiply(p.induced, s.ambient_body) +
                Multiply(p.eddy_s, s.ambient_body_rate);
  const double rate_magnitude = Norm(s.body_rate);
  s.currents_A.resize(p.currents.size());
  for (std::size_t k = 0; k < p.currents.size(); ++k) {
    const CurrentSource& src = p.currents[k];
    double i_a = src.base_A + src.rate_gain_A_s * rate_magnitude +
                 current_fluctuations_[k].Value(t);
    if (src.tilt_gain_A != 0.0 && cos_tilt > 1e-3) {
      i_a += src.tilt_gain_A * (1.0 / std::fabs(cos_tilt) - 1.0);
    }
    s.currents_A[k] = i_a;
    h_body = h_body + i_a * src.coupling_nT_per_A;
  }
  s.platform_body = h_body;
  s.total_body = s.ambient_body + h_body;
  return s;
}

SimulationResult PlatformSimulator::Run() const {
  const std::size_t n = samples_;
  const SimulatorConfig& cfg = config_;
  const std::size_t n_currents = cfg.platform.currents.size();
  SimulationResult r;
  auto reserve = [n](auto& v) { v.resize(n); };
  reserve(r.time_s);
  reserve(r.lat_deg);
  reserve(r.lon_deg);
  reserve(r.alt_m);
  reserve(r.roll_deg);
  reserve(r.pitch_deg);
  reserve(r.heading_deg);
  reserve(r.fluxgate_nT);
  reserve(r.scalar_nT);
  r.currents_A.assign(n_currents, std::vector<double>(n));
  if (cfg.temperature.logged) reserve(r.temperature_c);
  reserve(r.f_interference_true);
  reserve(r.f_ambient);
  reserve(r.f_earth);
  reserve(r.f_geology);
  reserve(r.f_diurnal);
  reserve(r.noise_f);
  reserve(r.spike_f);
  reserve(r.earth_body_nT);
  reserve(r.ambient_body_nT);
  reserve(r.ambient_body_rate_nT_s);
  reserve(r.platform_body_nT);
  reserve(r.maneuver_kind);
  reserve(r.maneuver_heading_deg);

  Random scalar_noise(cfg.seed, RandomStream::kScalarNoise);
  Random fluxgate_noise(cfg.seed, RandomStream::kFluxgateNoise);
  Random attitude_noise(cfg.seed, RandomStream::kAttitudeNoise);
  Random spikes(cfg.seed, RandomStream::kSpikes);
  Random temperature_noise(cfg.seed, RandomStream::kTemperature);
  Random current_noise(cfg.seed, RandomStream::kCurrentNoise);

  for (std::size_t i = 0; i < n; ++i) {
    const double t = static_cast<double>(i) / cfg.sample_rate_hz;
    const PhysicsState s = Evaluate(t);
    PhysicsState lagged;
    const bool lag = cfg.scalar.lag_s != 0.0;
    if (lag) lagged = Evaluate(t - cfg.scalar.lag_s);
    const PhysicsState& sl = lag ? lagged : s;

    r.time_s[i] = cfg.start_time_s + t;
    r.lat_deg[i] = s.lat_deg;
    r.lon_deg[i] = s.lon_deg;
    r.alt_m[i] = s.alt_m;
    const double sigma_att = cfg.attitude_noise_rad;
    const double n_roll = sigma_att * attitude_noise.Normal();
    const double n_pitch = sigma_att * attitude_noise.Normal();
    const double n_heading = sigma_att * attitude_noise.Normal();
    r.roll_deg[i] = (s.plan.attitude.roll + n_roll) * kRadToDeg;
    r.pitch_deg[i] = (s.plan.attitude.pitch + n_pitch) * kRadToDeg;
    r.heading_deg[i] =
        WrapDeg360((s.plan.attitude.heading + n_heading) * kRadToDeg);

    const double temp_true =
        cfg.temperature.start_c + cfg.temperature.drift_c_per_h * t / 3600.0;
    if (cfg.temperature.logged) {
      r.temperature_c[i] =
          temp_true + cfg.temperature.noise_rms_c * temperature_noise.Normal();
    }
    Vec3 raw = SensorRaw(cfg.fluxgate.errors, s.total_body, temp_true);
    const double sf = cfg.fluxgate.noise_rms_nT;
    raw.x += sf * fluxgate_noise.Normal();
    raw.y += sf * fluxgate_noise.Normal();
    raw.z += sf * fluxgate_noise.Normal();

    // |a + h| - |a| without cancellation: (2 a.h + h.h) / (|a + h| + |a|).
    const double f_total = Norm(sl.total_body);
    const double f_amb = Norm(sl.ambient_body);
    const Vec3& hp = sl.platform_body;
    const double interference =
        (2.0 * Dot(sl.ambient_body, hp) + Dot(hp, hp)) / (f_total + f_amb);
    const double noise = cfg.scalar.noise_rms_nT * scalar_noise.Normal();
    double spike = 0.0;
    if (cfg.faults.spike_fraction > 0 &&
        spikes.Uniform() < cfg.faults.spike_fraction) {
      spike = spikes.Uniform() < 0.5 ? -cfg.faults.spike_amplitude_nT
                                     : cfg.faults.spike_amplitude_nT;
    }
    if (cfg.faults.spikes_on_fluxgate) {
      // Along the measured field, so the fluxgate magnitude jumps by spike.
      const double m = Norm(raw);
      if (m > 0) raw = raw + (spike / m) * raw;
    }
    r.fluxgate_nT[i] = raw;
    r.scalar_nT[i] = cfg.scalar.present
                         ? f_total + noise +
                               (cfg.faults.spikes_on_fluxgate ? 0.0 : spike)
                         : kNaN;
    r.f_interference_true[i] = interference;
    r.f_ambient[i] = f_amb;
    r.f_earth[i] = Norm(sl.earth_ned);
    r.f_geology[i] = sl.geology_nT;
    r.f_diurnal[i] = sl.diurnal_nT;
    r.noise_f[i] = cfg.scalar.present ? noise : 0.0;
    r.spike_f[i] = spike;
    for (std::size_t k = 0; k < n_currents; ++k) {
      r.currents_A[k][i] =
          s.currents_A[k] +
          cfg.platform.currents[k].noise_rms_A * current_noise.Normal();
    }
    r.earth_body_nT[i] = s.earth_body;
    r.ambient_body_nT[i] = s.ambient_body;
    r.ambient_body_rate_nT_s[i] = s.ambient_body_rate;
    r.platform_body_nT[i] = s.platform_body;
    r.maneuver_kind[i] = static_cast<int>(s.plan.kind);
    r.maneuver_heading_deg[i] =
        s.plan.kind == ManeuverKind::kNone
            ? kNaN
            : WrapDeg360(s.plan.reference_heading * kRadToDeg);
  }

  for (const PlanSegment& g : cfg.plan.segments()) {
    if (g.kind == ManeuverKind::kNone) continue;
    ManeuverTruth m;
    m.start_s = g.start_s;
    m.end_s = g.start_s + g.duration_s;
    m.heading = WrapDeg360(g.reference_heading * kRadToDeg) * kDegToRad;
    m.kind = g.kind;
    r.maneuvers.push_back(m);
  }

  // Dropouts: NaN runs in place, time gaps by removing rows.
  Random dropouts(cfg.seed, RandomStream::kDropouts);
  const double duration = static_cast<double>(n - 1) / cfg.sample_rate_hz;
  std::vector<char> keep(n, 1);
  for (const Dropout& d : cfg.faults.dropouts) {
    std::vector<double> starts = d.at_s;
    if (starts.empty()) {
      const double span = std::max(0.0, duration - d.duration_s);
      for (int c = 0; c < d.count; ++c) {
        starts.push_back(dropouts.Uniform() * span);
      }
    }
    for (double start : starts) {
      const double first = std::ceil(start * cfg.sample_rate_hz - 1e-9);
      const double last = (start + d.duration_s) * cfg.sample_rate_hz;
      for (double k = std::max(0.0, first);
           k < last && k < static_cast<double>(n); k += 1.0) {
        const std::size_t i = static_cast<std::size_t>(k);
        if (d.kind == Dropout::Kind::kTimeGap) {
          keep[i] = 0;
          continue;
        }
        if (d.channels != Dropout::Channels::kFluxgate) r.scalar_nT[i] = kNaN;
        if (d.channels != Dropout::Channels::kScalar) {
          r.fluxgate_nT[i] = {kNaN, kNaN, kNaN};
        }
      }
    }
  }
  std::size_t kept = 0;
  for (std::size_t i = 0; i < n; ++i) kept += keep[i] ? 1 : 0;
  if (kept < n) {
    auto compact = [&keep](auto& v) {
      std::size_t w = 0;
      for (std::size_t i = 0; i < v.size(); ++i) {
        if (keep[i]) v[w++] = v[i];
      }
      v.resize(w);
    };
    compact(r.time_s);
    compact(r.lat_deg);
    compact(r.lon_deg);
    compact(r.alt_m);
    compact(r.roll_deg);
    compact(r.pitch_deg);
    compact(r.heading_deg);
    compact(r.fluxgate_nT);
    compact(r.scalar_nT);
    for (auto& c : r.currents_A) compact(c);
    if (cfg.temperature.logged) compact(r.temperature_c);
    compact(r.f_interference_true);
    compact(r.f_ambient);
    compact(r.f_earth);
    compact(r.f_geology);
    compact(r.f_diurnal);
    compact(r.noise_f);
    compact(r.spike_f);
    compact(r.earth_body_nT);
    compact(r.ambient_body_nT);
    compact(r.ambient_body_rate_nT_s);
    compact(r.platform_body_nT);
    compact(r.maneuver_kind);
    compact(r.maneuver_heading_deg);
    r.removed_samples = n - kept;
  }
  return r;
}

SimulationResult Simulate(const SimulatorConfig& config) {
  return PlatformSimulator(config).Run();
}

}  // namespace fluxtrim::models
