// Platform simulator: the physics against Tolles-Lawson, rotation
// conventions, derivatives, sensor model, seeds, lag, noise, dropouts and
// the plan builders.

#include "models/simulator.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <random>
#include <vector>

#include "models/anomaly.h"
#include "models/attitude.h"
#include "models/maneuver_plan.h"
#include "models/random.h"
#include "models/tolles_lawson.h"

namespace fluxtrim::models {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kDeg = kPi / 180.0;

// An aircraft-like platform with small fields (a few nT to tens of nT),
// every induced and eddy element non-zero and non-symmetric, so that every
// Tolles-Lawson term is exercised.
PlatformField SmallPlatform() {
  PlatformField p;
  p.permanent_nT = {6.0, -4.0, 9.0};
  const double induced[3][3] = {{2.0e-4, -5.0e-5, 1.0e-4},
                                {3.0e-5, -1.0e-4, 4.0e-5},
                                {-6.0e-5, 2.0e-5, 3.0e-4}};
  const double eddy[3][3] = {{2.0e-4, 1.0e-4, -3.0e-5},
                             {-1.0e-4, 1.5e-4, 6.0e-5},
                             {5.0e-5, -4.0e-5, 1.0e-4}};
  for (int i = 0; i < 3; ++i) {
    for (int j = 0; j < 3; ++j) {
      p.induced.m[i][j] = induced[i][j];
      p.eddy_s.m[i][j] = eddy[i][j];
    }
  }
  return p;
}

SimulatorConfig BoxConfig(double speed_mps) {
  SimulatorConfig c;
  c.sample_rate_hz = 10.0;
  c.start_time_s = 30600.0;
  c.decimal_year_at_midnight = 2025.45;
  c.start_lat_deg = -31.95;
  c.start_lon_deg = 141.45;
  c.start_alt_m = 2800.0;
  CompensationBoxOptions box;
  box.speed_mps = speed_mps;
  box.lead_in_s = 5.0;
  box.settle_s = 4.0;
  box.cycles = 2;
  c.plan = BuildCompensationBox(box);
  c.turbulence.roll_rms = 0.2 * kDeg;
  c.turbulence.pitch_rms = 0.1 * kDeg;
  c.turbulence.heading_rms = 0.1 * kDeg;
  c.platform = SmallPlatform();
  c.scalar.present = true;
  return c;
}

// Tolles-Lawson coefficients (models/tolles_lawson.h, `full` 18-term set)
// of the platform: the scalar sensor sees d projected on c = B/|B|:
//   c.p                      -> perm_i = p_i
//   c.(M B) = Bt c^T M c     -> ind_ii = M_ii, ind_ij = M_ij + M_ji (i < j)
//   c.(E B') = Bt sum E_ij c_i c'_j + |B|' c^T E c
//                            -> eddy_ij = E_ij (the |B|' part is the
//                               change of the field magnitude, zero for a
//                               pure rotation in a uniform field)
//   c.(I g)                  -> aux_<name>_i = g_i
std::vector<double> TollesLawsonCoefficients(const PlatformField& p) {
  std::vector<double> k;
  k.push_back(p.permanent_nT.x);
  k.push_back(p.permanent_nT.y);
  k.push_back(p.permanent_nT.z);
  for (int i = 0; i < 3; ++i) {
    for (int j = i; j < 3; ++j) {
      k.push_back(i == j ? p.induced.m[i][i]
                         : p.induced.m[i][j] + p.induced.m[j][i]);
    }
  }
  for (int i = 0; i < 3; ++i) {
    for (int j = 0; j < 3; ++j) k.push_back(p.eddy_s.m[i][j]);
  }
  for (const CurrentSource& c : p.currents) {
    k.push_back(c.coupling_nT_per_A.x);
    k.push_back(c.coupling_nT_per_A.y);
    k.push_back(c.coupling_nT_per_A.z);
  }
  return k;
}

// The identity check shared by the next two tests. With d the platform
// field and B the ambient field at the sensor, c = B/|B|:
//   |B + d| = sqrt(|B|^2 + 2 B.d + |d|^2)
//           = |B| + c.d + (|d|^2 - (c.d)^2) / (2|B|) + O(|d|^3 / |B|^2)
// (Taylor expansion of sqrt(1 + x), x = (2 B.d + |d|^2)/|B|^2). The
// second-order term lies in [0, |d|^2 / (2|B|)] because 0 <= |d|^2 - (c.d)^2
// <= |d|^2, so to second order
//   | (|B + d| - |B|) - c.d | <= |d|^2 / (2|B|).
// The third-order remainder is below |d|^3/|B|^2 (a few 1e-12 nT here),
// covered by kRounding_nT together with double rounding of ~5e4 nT values
// (5e4 * 1.1e-16 * a few operations ~ 1e-11 nT).
constexpr double kRounding_nT = 1e-9;

void ExpectTollesLawsonIdentity(const SimulatorConfig& config,
                                bool include_magnitude_rate) {
  const SimulationResult r = Simulate(config);
  TermOptions terms;
  terms.full = true;
  for (const CurrentSource& c : config.platform.currents) {
    terms.aux.push_back(c.name);
  }
  const std::vector<double> k = TollesLawsonCoefficients(config.platform);
  ASSERT_EQ(k.size(), TermCount(terms));
  std::vector<double> row(k.size());
  double largest_bound = 0.0, largest_signal = 0.0, worst_excess = -1e300;
  for (std::size_t i = 0; i < r.time_s.size(); ++i) {
    const Vec3& b = r.ambient_body_nT[i];
    const Vec3& db = r.ambient_body_rate_nT_s[i];
    const Vec3& d = r.platform_body_nT[i];
    const double bt = Norm(b);
    const Vec3 cv = (1.0 / bt) * b;
    // d(B/|B|)/dt = (B' - c (c.B')) / |B|, analytically.
    const Vec3 dcv = (1.0 / bt) * (db - Dot(cv, db) * cv);
    const double c[3] = {cv.x, cv.y, cv.z};
    const double dc[3] = {dcv.x, dcv.y, dcv.z};
    std::vector<double> aux;
    for (const auto& channel : r.currents_A) aux.push_back(channel[i]);
    FillTermRow(terms, c, dc, bt, aux.empty() ? nullptr : aux.data(),
                row.data());
    double tl = 0.0;
    for (std::size_t t = 0; t < k.size(); ++t) tl += row[t] * k[t];
    if (include_magnitude_rate) {
      const Vec3 ec = Multiply(config.platform.eddy_s, cv);
      tl += Dot(cv, db) * Dot(cv, ec);
    }
    const double bound = Dot(d, d) / (2.0 * bt);
    const double error = std::fabs(r.f_interference_true[i] - tl);
    ASSERT_LE(error, bound + kRounding_nT)
        << "sample " << i << ": simulated " << r.f_interference_true[i]
        << " nT, Tolles-Lawson " << tl << " nT";
    largest_bound = std::max(largest_bound, bound);
    largest_signal = std::max(largest_signal, std::fabs(tl));
    worst_excess = std::max(worst_excess, error - bound);
  }
  // The bound must be far below the signal, or the check proves nothing.
  EXPECT_GT(largest_signal, 1000.0 * largest_bound);
  std::printf("TL identity: largest |TL| %.4f nT, largest bound %.2e nT\n",
              largest_signal, largest_bound);
}

TEST(SimulatorTest, ScalarReadingMinusAmbientIsTollesLawsonSumInUniformField) {
  // Pure rotations in a fixed field: |B| is constant, so the TL sum alone
  // must hold to second order.
  SimulatorConfig c = BoxConfig(0.0);
  c.environment.main_field = false;
  c.environment.fixed_field_ned_nT = {24000.0, 3500.0, -51000.0};
  CurrentSource motor;
  motor.name = "i_motor";
  motor.coupling_nT_per_A = {0.25, -0.3, 0.15};
  motor.base_A = 12.0;
  motor.rate_gain_A_s = 20.0;
  motor.fluctuation_rms_A = 1.5;
  c.platform.currents.push_back(motor);
  ExpectTollesLawsonIdentity(c, false);
}

TEST(SimulatorTest, ScalarReadingMinusAmbientIsTollesLawsonSumAlongWmmTrack) {
  // A moving aircraft in the WMM field: |B| changes slowly along the track,
  // so the |B|' c^T E c part of the eddy projection is added explicitly.
  ExpectTollesLawsonIdentity(BoxConfig(70.0), true);
}

TEST(SimulatorTest, HeadingNinetyLevelShowsNorthFieldOnPortAxis) {
  // Derivation: C_bn = R1(0) R2(0) R3(90 deg); R3(psi) maps NED (n, e, d) to
  // (n cos psi + e sin psi, -n sin psi + e cos psi, d), so a field of
  // (1, 0, 0) becomes (0, -1, 0): flying east, north is on the left (port,
  // -y) side.
  const Vec3 b = Multiply(NedToBody({0.0, 0.0, 90.0 * kDeg}), {1.0, 0.0, 0.0});
  EXPECT_NEAR(b.x, 0.0, 1e-15);
  EXPECT_NEAR(b.y, -1.0, 1e-15);
  EXPECT_NEAR(b.z, 0.0, 1e-15);
}

TEST(SimulatorTest, NoseUpAndStarboardDownTiltTheDownwardField) {
  // Nose up by theta: the body x axis points above the horizon, so a
  // downward field has x component -sin(theta) and z component cos(theta).
  const double th = 10.0 * kDeg;
  const Vec3 p = Multiply(NedToBody({0.0, th, 0.0}), {0.0, 0.0, 1.0});
  EXPECT_NEAR(p.x, -std::sin(th), 1e-15);
  EXPECT_NEAR(p.z, std::cos(th), 1e-15);
  // Starboard wing down by phi: the y axis points below the horizon, so the
  // downward field has a positive y component sin(phi).
  const double ph = 20.0 * kDeg;
  const Vec3 r = Multiply(NedToBody({ph, 0.0, 0.0}), {0.0, 0.0, 1.0});
  EXPECT_NEAR(r.y, std::sin(ph), 1e-15);
  EXPECT_NEAR(r.z, std::cos(ph), 1e-15);
}

TEST(SimulatorTest, DirectionCosineMatrixIsOrthonormal) {
  const Mat3 c = NedToBody({0.3, -0.2, 2.5});
  for (int i = 0; i < 3; ++i) {
    for (int j = 0; j < 3; ++j) {
      double dot = 0.0;
      for (int k = 0; k < 3; ++k) dot += c.m[i][k] * c.m[j][k];
      EXPECT_NEAR(dot, i == j ? 1.0 : 0.0, 1e-15);
    }
  }
}

TEST(SimulatorTest, BodyFieldRateMatchesNumericalDerivative) {
  // Independent check of b' = -w x b + C B': central differences of the
  // body field itself over +-h. Truncation error h^2 |b'''| / 6 with
  // |b'''| ~ |b| w^3 (w < 1 rad/s here): 5.7e4 * 1e-8 / 6 ~ 1e-4 nT/s;
  // rounding 5.7e4 * 1e-16 / 1e-4 ~ 6e-8 nT/s. Rates reach 1e3-1e4 nT/s.
  constexpr double kStep_s = 1e-4;
  constexpr double kTol_nT_s = 2e-3;
  SimulatorConfig c = BoxConfig(70.0);
  c.environment.geology.rms_nT = 20.0;
  c.environment.geology.min_wavelength_m = 300.0;
  c.environment.diurnal.micropulsation_rms_nT = 1.0;
  const PlatformSimulator sim(c);
  double largest = 0.0;
  for (double t = 3.0; t < c.plan.duration_s(); t += 7.3) {
    const PhysicsState s = sim.Evaluate(t);
    const Vec3 a = sim.Evaluate(t + kStep_s).ambient_body;
    const Vec3 b = sim.Evaluate(t - kStep_s).ambient_body;
    const Vec3 numeric = (0.5 / kStep_s) * (a - b);
    EXPECT_NEAR(s.ambient_body_rate.x, numeric.x, kTol_nT_s) << "t=" << t;
    EXPECT_NEAR(s.ambient_body_rate.y, numeric.y, kTol_nT_s) << "t=" << t;
    EXPECT_NEAR(s.ambient_body_rate.z, numeric.z, kTol_nT_s) << "t=" << t;
    largest = std::max(largest, Norm(numeric));
  }
  EXPECT_GT(largest, 500.0);  // the maneuvers do rotate the field
}

TEST(SimulatorTest, FluxgateReadsSensorModelOfTotalField) {
  SimulatorConfig c = BoxConfig(70.0);
  SensorCalibration& e = c.fluxgate.errors;
  e.gains[0] = 1.02;
  e.gains[1] = 0.985;
  e.gains[2] = 1.01;
  e.offsets_nT[0] = 40.0;
  e.offsets_nT[1] = -25.0;
  e.offsets_nT[2] = 12.0;
  e.nonorthogonality_rad[0] = 0.4 * kDeg;
  e.nonorthogonality_rad[1] = -0.3 * kDeg;
  e.nonorthogonality_rad[2] = 0.2 * kDeg;
  const SimulationResult r = Simulate(c);
  // SensorCorrect is the exact inverse of the forward model
  // (models/fluxgate_sensor.h): with noise off it returns the true total
  // field to rounding (values ~5e4 nT, relative 1e-15 -> 1e-10 nT).
  constexpr double kTol_nT = 1e-8;
  double largest_error_effect = 0.0;
  for (std::size_t i = 0; i < r.time_s.size(); i += 17) {
    const Vec3 total = r.ambient_body_nT[i] + r.platform_body_nT[i];
    const Vec3 back = SensorCorrect(e, r.fluxgate_nT[i]);
    EXPECT_NEAR(back.x, total.x, kTol_nT);
    EXPECT_NEAR(back.y, total.y, kTol_nT);
    EXPECT_NEAR(back.z, total.z, kTol_nT);
    largest_error_effect = std::max(
        largest_error_effect, std::fabs(Norm(r.fluxgate_nT[i]) - Norm(total)));
  }
  // Gains of 2% on ~5e4 nT change the magnitude by hundreds of nT.
  EXPECT_GT(largest_error_effect, 100.0);
}

TEST(SimulatorTest, SameSeedRepeatsBitForBitAndAnotherSeedDiffers) {
  SimulatorConfig c = BoxConfig(70.0);
  c.scalar.noise_rms_nT = 0.01;
  c.fluxgate.noise_rms_nT = 0.1;
  c.attitude_noise_rad = 0.01 * kDeg;
  c.environment.geology.rms_nT = 5.0;
  c.seed = 42;
  const SimulationResult a = Simulate(c);
  const SimulationResult b = Simulate(c);
  ASSERT_EQ(a.scalar_nT.size(), b.scalar_nT.size());
  EXPECT_EQ(0, std::memcmp(a.scalar_nT.data(), b.scalar_nT.data(),
                           a.scalar_nT.size() * sizeof(double)));
  EXPECT_EQ(0, std::memcmp(a.fluxgate_nT.data(), b.fluxgate_nT.data(),
                           a.fluxgate_nT.size() * sizeof(Vec3)));
  c.seed = 43;
  const SimulationResult other = Simulate(c);
  EXPECT_NE(0, std::memcmp(a.scalar_nT.data(), other.scalar_nT.data(),
                           a.scalar_nT.size() * sizeof(double)));
}

TEST(SimulatorTest, MapSeedKeepsGeologyWhenNoiseSeedChanges) {
  SimulatorConfig c = BoxConfig(70.0);
  c.environment.geology.rms_nT = 5.0;
  c.environment.has_geology_seed = true;
  c.environment.geology_seed = 7;
  c.scalar.noise_rms_nT = 0.01;
  c.seed = 1;
  const SimulationResult a = Simulate(c);
  c.seed = 2;
  const SimulationResult b = Simulate(c);
  EXPECT_EQ(a.f_geology, b.f_geology);
  EXPECT_NE(a.noise_f, b.noise_f);
}

TEST(SimulatorTest, PortableUniformAndNormalDeviates) {
  // The C++ standard fixes std::mt19937_64: its 10000th output from the
  // default seed is 9981545732273789042 ([rand.predef]; ISO/IEC 14882).
  std::mt19937_64 engine;
  engine.discard(9999);
  EXPECT_EQ(engine(), 9981545732273789042ULL);
  // Our deviates: uniform in [0, 1), normal with mean 0 and variance 1.
  // For n = 200000 samples the standard error of the mean is 1/sqrt(n) =
  // 0.0022 and of the variance sqrt(2/n) = 0.0032; tolerances of 5 standard
  // errors.
  Random rng(12345, RandomStream::kScalarNoise);
  const int n = 200000;
  double sum = 0.0, sum2 = 0.0, umin = 1.0, umax = 0.0;
  for (int i = 0; i < n; ++i) {
    const double u = rng.Uniform();
    umin = std::min(umin, u);
    umax = std::max(umax, u);
    const double z = rng.Normal();
    sum += z;
    sum2 += z * z;
  }
  EXPECT_GE(umin, 0.0);
  EXPECT_LT(umax, 1.0);
  EXPECT_NEAR(sum / n, 0.0, 5 * 0.0022);
  EXPECT_NEAR(sum2 / n, 1.0, 5 * 0.0032);
}

TEST(SimulatorTest, InjectedNoiseHasRequestedStandardDeviation) {
  SimulatorConfig c = BoxConfig(70.0);
  c.scalar.noise_rms_nT = 0.02;
  const SimulationResult r = Simulate(c);
  double sum2 = 0.0;
  for (std::size_t i = 0; i < r.noise_f.size(); ++i) {
    sum2 += r.noise_f[i] * r.noise_f[i];
    // f = |ambient + platform| + noise exactly (no spikes, no lag).
    const double total =
        Norm(r.ambient_body_nT[i] + r.platform_body_nT[i]);
    ASSERT_NEAR(r.scalar_nT[i], total + r.noise_f[i], 1e-10);
  }
  const double n = static_cast<double>(r.noise_f.size());
  // Relative standard error of an rms estimate: 1/sqrt(2 n) (normal
  // sampling theory); 5 standard errors.
  EXPECT_NEAR(std::sqrt(sum2 / n), 0.02, 0.02 * 5.0 / std::sqrt(2.0 * n));
}

TEST(SimulatorTest, ScalarLagReadsTheFieldEarlier) {
  SimulatorConfig c = BoxConfig(70.0);
  c.scalar.lag_s = 0.3;
  const PlatformSimulator sim(c);
  const SimulationResult r = sim.Run();
  bool differs = false;
  for (std::size_t i = 0; i < r.time_s.size(); i += 101) {
    const double t = static_cast<double>(i) / c.sample_rate_hz;
    const double lagged = Norm(sim.Evaluate(t - 0.3).total_body);
    const double now = Norm(sim.Evaluate(t).total_body);
    EXPECT_EQ(r.scalar_nT[i], lagged);
    differs = differs || std::fabs(now - lagged) > 1e-3;
  }
  EXPECT_TRUE(differs);
}

TEST(SimulatorTest, TimeGapsRemoveSamplesAndNanRunsBlankChannels) {
  SimulatorConfig c = BoxConfig(70.0);
  Dropout gap;
  gap.kind = Dropout::Kind::kTimeGap;
  gap.duration_s = 2.0;
  gap.at_s = {50.0};
  Dropout blank;
  blank.kind = Dropout::Kind::kNanRun;
  blank.channels = Dropout::Channels::kScalar;
  blank.duration_s = 1.0;
  blank.at_s = {100.0};
  c.faults.dropouts = {gap, blank};
  const PlatformSimulator sim(c);
  const SimulationResult r = sim.Run();
  // 10 Hz: [50, 52) s holds 20 samples.
  EXPECT_EQ(r.removed_samples, 20u);
  EXPECT_EQ(r.time_s.size() + 20, sim.sample_count());
  std::size_t gaps = 0, blanks = 0;
  for (std::size_t i = 1; i < r.time_s.size(); ++i) {
    if (r.time_s[i] - r.time_s[i - 1] > 0.15) {
      ++gaps;
      EXPECT_NEAR(r.time_s[i - 1] - c.start_time_s, 49.9, 1e-9);
      EXPECT_NEAR(r.time_s[i] - c.start_time_s, 52.0, 1e-9);
    }
  }
  for (std::size_t i = 0; i < r.time_s.size(); ++i) {
    if (std::isnan(r.scalar_nT[i])) {
      ++blanks;
      EXPECT_FALSE(std::isnan(r.fluxgate_nT[i].x));
      const double t = r.time_s[i] - c.start_time_s;
      EXPECT_TRUE(t >= 100.0 - 1e-9 && t < 101.0);
    }
  }
  EXPECT_EQ(gaps, 1u);
  EXPECT_EQ(blanks, 10u);
  EXPECT_EQ(r.f_interference_true.size(), r.time_s.size());
}

TEST(SimulatorTest, SpikesHitTheRequestedFraction) {
  SimulatorConfig c = BoxConfig(70.0);
  c.faults.spike_fraction = 0.05;
  c.faults.spike_amplitude_nT = 50.0;
  const SimulationResult r = Simulate(c);
  double hits = 0;
  for (double s : r.spike_f) {
    if (s != 0.0) {
      ++hits;
      EXPECT_EQ(std::fabs(s), 50.0);
    }
  }
  const double n = static_cast<double>(r.spike_f.size());
  // Binomial count: sd sqrt(n p (1 - p)); 5 standard deviations.
  EXPECT_NEAR(hits, 0.05 * n, 5.0 * std::sqrt(n * 0.05 * 0.95));
}

TEST(SimulatorTest, CompensationBoxFliesThreeManeuversOnEachOfFourHeadings) {
  const ManeuverPlan plan = BuildCompensationBox(CompensationBoxOptions());
  std::vector<std::pair<int, double>> seen;
  for (const PlanSegment& s : plan.segments()) {
    if (s.kind == ManeuverKind::kNone) continue;
    seen.push_back({static_cast<int>(s.kind), s.reference_heading / kDeg});
    // Common-practice default: 3 cycles of 6 s.
    EXPECT_DOUBLE_EQ(s.duration_s, 18.0);
  }
  ASSERT_EQ(seen.size(), 12u);
  for (std::size_t i = 0; i < seen.size(); ++i) {
    EXPECT_EQ(seen[i].first, static_cast<int>(i % 3) + 1);
    EXPECT_NEAR(seen[i].second, 90.0 * static_cast<double>(i / 3), 1e-9);
  }
  // In the middle of the first roll maneuver the roll reaches the default
  // amplitude (10 deg) and pitch stays level.
  double roll_max = 0.0, pitch_max = 0.0;
  const PlanSegment& roll = plan.segments()[3];
  ASSERT_EQ(roll.kind, ManeuverKind::kRoll);
  for (double t = roll.start_s; t < roll.start_s + roll.duration_s; t += 0.05) {
    const PlanState s = plan.Evaluate(t);
    roll_max = std::max(roll_max, std::fabs(s.attitude.roll));
    pitch_max = std::max(pitch_max, std::fabs(s.attitude.pitch));
  }
  EXPECT_NEAR(roll_max / kDeg, 10.0, 0.01);
  EXPECT_EQ(pitch_max, 0.0);
}

TEST(SimulatorTest, PlanAnglesAndRatesAreContinuousAcrossSegments) {
  // The smooth step makes every rate zero at segment ends: check the jump
  // of each rate across every boundary is tiny compared with its peak.
  const ManeuverPlan plan = BuildCompensationBox(CompensationBoxOptions());
  for (const PlanSegment& s : plan.segments()) {
    if (s.start_s == 0.0) continue;
    const PlanState a = plan.Evaluate(s.start_s - 1e-7);
    const PlanState b = plan.Evaluate(s.start_s);
    EXPECT_NEAR(a.attitude.roll, b.attitude.roll, 1e-6);
    EXPECT_NEAR(a.attitude.pitch, b.attitude.pitch, 1e-6);
    EXPECT_NEAR(a.attitude.heading, b.attitude.heading, 1e-6);
    EXPECT_NEAR(a.rates.roll, b.rates.roll, 1e-5);
    EXPECT_NEAR(a.rates.pitch, b.rates.pitch, 1e-5);
    EXPECT_NEAR(a.rates.heading, b.rates.heading, 1e-5);
  }
}

TEST(SimulatorTest, PlanRatesMatchNumericalDerivativeOfAngles) {
  // Analytic Euler rates (bank, tilt, maneuvers) against central
  // differences (h = 1e-5 s: truncation ~ h^2 |angle'''| < 1e-9 rad/s).
  DroneRotationOptions drone;
  SurveyLinesOptions lines;
  lines.line_length_m = 2000.0;
  const ManeuverPlan plans[3] = {
      BuildCompensationBox(CompensationBoxOptions()),
      BuildDroneRotations(drone), BuildSurveyLines(lines)};
  constexpr double h = 1e-5;
  for (const ManeuverPlan& plan : plans) {
    for (double t = 0.37; t < plan.duration_s(); t += 1.91) {
      const PlanState s = plan.Evaluate(t);
      const PlanState a = plan.Evaluate(t + h);
      const PlanState b = plan.Evaluate(t - h);
      EXPECT_NEAR(s.rates.roll, (a.attitude.roll - b.attitude.roll) / (2 * h),
                  1e-6);
      EXPECT_NEAR(s.rates.pitch,
                  (a.attitude.pitch - b.attitude.pitch) / (2 * h), 1e-6);
      EXPECT_NEAR(s.rates.heading,
                  (a.attitude.heading - b.attitude.heading) / (2 * h), 1e-6);
    }
  }
}

TEST(SimulatorTest, CoordinatedTurnBanksForTheTurnRate) {
  // Level coordinated turn: tan(bank) = v * turn_rate / g (Anderson,
  // "Introduction to Flight", sec. 6.17, from memory). A standard-rate turn
  // (3 deg/s, common practice) at 70 m/s peaks at a bank near 20.5 deg.
  CompensationBoxOptions o;
  const ManeuverPlan plan = BuildCompensationBox(o);
  double peak_bank = 0.0, peak_rate = 0.0;
  for (double t = 0.0; t < plan.duration_s(); t += 0.1) {
    const PlanState s = plan.Evaluate(t);
    if (s.kind != ManeuverKind::kNone) continue;
    peak_bank = std::max(peak_bank, s.attitude.roll);
    peak_rate = std::max(peak_rate, s.rates.heading);
  }
  EXPECT_NEAR(peak_rate / kDeg, 3.0, 0.01);
  EXPECT_NEAR(std::tan(peak_bank), 70.0 * peak_rate / 9.80665, 1e-4);
}

TEST(SimulatorTest, SurveyLinesLieAtTheRequestedSpacing) {
  SimulatorConfig c = BoxConfig(70.0);
  SurveyLinesOptions lines;
  lines.heading = 0.0;
  lines.line_count = 2;
  lines.line_length_m = 3000.0;
  // Two standard-rate (3 deg/s) quarter turns at 70 m/s already take
  // about 4.9 km sideways; 8 km leaves a transit leg.
  lines.line_spacing_m = 8000.0;
  lines.speed_mps = 70.0;
  c.plan = BuildSurveyLines(lines);
  c.turbulence = TurbulenceOptions();
  const PlatformSimulator sim(c);
  // Middle of line 1 and of line 2 (flown south), from the plan.
  const std::vector<PlanSegment>& g = c.plan.segments();
  const double t1 = g[1].start_s + 0.5 * g[1].duration_s;
  const double t2 = g.back().start_s + 0.5 * g.back().duration_s;
  const PhysicsState a = sim.Evaluate(t1);
  const PhysicsState b = sim.Evaluate(t2);
  // Simpson integration of the turns (400 intervals) is exact to far
  // below a millimetre; the track integration likewise.
  EXPECT_NEAR(b.east_m - a.east_m, 8000.0, 1e-3);
  EXPECT_NEAR(std::cos(b.plan.course), -1.0, 1e-12);
}

TEST(SimulatorTest, DroneStopsInTurnsSoGridLinesCanLieClose) {
  SimulatorConfig c = BoxConfig(5.0);
  SurveyLinesOptions lines;
  lines.heading = 0.0;
  lines.line_count = 3;
  lines.line_length_m = 200.0;
  lines.line_spacing_m = 10.0;
  lines.speed_mps = 5.0;
  lines.turn = {45.0 * kDeg, 2.0, false, true};
  c.plan = BuildSurveyLines(lines);
  c.turbulence = TurbulenceOptions();
  const PlatformSimulator sim(c);
  const std::vector<PlanSegment>& g = c.plan.segments();
  const double t1 = g[1].start_s + 0.5 * g[1].duration_s;
  const double t3 = g.back().start_s + 0.5 * g.back().duration_s;
  EXPECT_NEAR(sim.Evaluate(t3).east_m - sim.Evaluate(t1).east_m, 20.0, 1e-3);
  // Turning, the drone is at rest.
  const PlanSegment& turn = g[2];
  ASSERT_GT(turn.course1 - turn.course0, 1.0);
  EXPECT_NEAR(c.plan.Evaluate(turn.start_s + 0.5 * turn.duration_s).speed_mps,
              0.0, 1e-12);
}

TEST(SimulatorTest, DroneRotationsSweepTheFieldAcrossTheBody) {
  SimulatorConfig c = BoxConfig(0.5);
  c.plan = BuildDroneRotations(DroneRotationOptions());
  c.environment.main_field = false;
  c.environment.fixed_field_ned_nT = {24000.0, 3500.0, -51000.0};
  const SimulationResult r = Simulate(c);
  double zmin = 1.0, zmax = -1.0, xmin = 1.0, xmax = -1.0;
  for (const Vec3& b : r.ambient_body_nT) {
    const Vec3 u = (1.0 / Norm(b)) * b;
    zmin = std::min(zmin, u.z);
    zmax = std::max(zmax, u.z);
    xmin = std::min(xmin, u.x);
    xmax = std::max(xmax, u.x);
  }
  // Field inclination asin(-51000/56480) = -64.6 deg; tilting by up to 30
  // deg moves the body-z component between cos(25.4 +- 30 deg) of the
  // upward field: z spans about -1 to -0.57, and x swings to both signs.
  EXPECT_LT(zmin, -0.99);
  EXPECT_GT(zmax, -0.62);
  EXPECT_LT(xmin, -0.7);
  EXPECT_GT(xmax, 0.7);
}

TEST(SimulatorTest, DipoleOnItsAxisGivesTwiceMomentOverDistanceCubed) {
  // Axial field of a dipole: B = (mu0 / 4 pi) 2 m / r^3 (Blakely 1995,
  // eq. 4.13; any electromagnetism text; from memory): 1 A m^2 at 2 m,
  // straight below a downward moment: 100 * 2 / 8 = 25 nT, pointing down.
  DipoleSource d;
  d.alt_m = 0.0;
  d.moment_Am2 = {0.0, 0.0, 1.0};
  const Vec3 b = DipoleField(d, 0.0, 0.0, -2.0);
  EXPECT_NEAR(b.z, 25.0, 1e-12);
  // Equatorial field: -(mu0/4pi) m / r^3 = -12.5 nT at 2 m to the north.
  const Vec3 e = DipoleField(d, 2.0, 0.0, 0.0);
  EXPECT_NEAR(e.z, -12.5, 1e-12);
  EXPECT_NEAR(e.x, 0.0, 1e-12);
}

TEST(SimulatorTest, GeologyHasRequestedRmsAndContinuesUpward) {
  GeologyOptions o;
  o.rms_nT = 10.0;
  o.min_wavelength_m = 100.0;
  o.max_wavelength_m = 1000.0;
  o.components = 256;
  Random rng(3, RandomStream::kGeology);
  const GeologyField g(o, &rng);
  double sum2 = 0.0;
  int n = 0;
  for (double x = 0; x < 20000.0; x += 137.0) {
    for (double y = 0; y < 20000.0; y += 151.0) {
      const double v = g.Value(x, y, 0.0);
      sum2 += v * v;
      ++n;
    }
  }
  // A finite map of a random-phase sum estimates the rms to a few percent
  // (spatial averaging over ~20-200 wavelengths); 10 %.
  EXPECT_NEAR(std::sqrt(sum2 / n), 10.0, 1.0);
  // One component: upward continuation by dz multiplies it by exp(-k dz)
  // (Blakely 1995, eq. 12.14, from memory).
  GeologyOptions one = o;
  one.components = 1;
  one.min_wavelength_m = one.max_wavelength_m = 500.0;
  Random rng1(5, RandomStream::kGeology);
  const GeologyField g1(one, &rng1);
  const double k = 2.0 * kPi / 500.0;
  for (double x = 0; x < 1000.0; x += 77.0) {
    EXPECT_NEAR(g1.Value(x, 13.0, 100.0),
                std::exp(-k * 100.0) * g1.Value(x, 13.0, 0.0), 1e-12);
  }
}

TEST(SimulatorTest, InvalidConfigurationIsRefusedWithItsReason) {
  SimulatorConfig c = BoxConfig(70.0);
  c.sample_rate_hz = 0.0;
  EXPECT_THROW(PlatformSimulator{c}, std::invalid_argument);
  c = BoxConfig(70.0);
  c.fluxgate.errors.gains[1] = 0.0;
  std::string error;
  EXPECT_FALSE(c.IsValid(&error));
  EXPECT_NE(error.find("gains"), std::string::npos) << error;
  c = BoxConfig(70.0);
  c.plan = ManeuverPlan();
  EXPECT_FALSE(c.IsValid(&error));
  EXPECT_NE(error.find("plan"), std::string::npos) << error;
}

}  // namespace
}  // namespace fluxtrim::models
