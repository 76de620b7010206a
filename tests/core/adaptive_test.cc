#include "src/core/adaptive.h"

#include <fcntl.h>
#include <gtest/gtest.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <random>
#include <sstream>
#include <stdexcept>
#include <string>
#include <vector>

#include "io/error.h"
#include "io/memory_recording.h"
#include "io/model_file.h"
#include "io/recording.h"
#include "models/tolles_lawson.h"
#include "src/core/apply.h"
#include "src/core/butterworth.h"
#include "src/core/fit.h"
#include "src/core/fit_model.h"
#include "src/core/stream.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::core {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kRateHz = 10.0;
constexpr double kNoiseNt = 0.02;  // white sensor noise of the simulation

// Standard errors written into the test model, per group (physical units).
double StdError(const std::string& name) {
  if (name.rfind("perm", 0) == 0) return 0.2;  // nT
  if (name.rfind("ind", 0) == 0) return 1e-5;  // 1
  return 4e-6;                                 // s
}

proto::CompensationModel TestModel(const std::vector<double>& theta) {
  proto::CompensationModel m;
  m.set_schema_version(io::kModelSchemaVersion);
  m.mutable_terms()->set_set("default");
  const std::vector<std::string> names =
      models::TermNames(models::TermOptions());
  for (std::size_t j = 0; j < names.size(); ++j) {
    proto::Coefficient* c = m.add_coefficients();
    c->set_name(names[j]);
    c->set_value(theta[j]);
    c->set_std_error(StdError(names[j]));
    m.mutable_terms()->add_names(names[j]);
  }
  m.set_derivative_half_width(2);
  m.set_sample_rate_hz(kRateHz);
  m.set_gap_factor(1.5);
  m.mutable_filter()->set_order(4);
  m.mutable_filter()->set_low_hz(0.1);
  m.mutable_filter()->set_high_hz(0.9);
  m.mutable_inputs()->set_field_source("f");
  // Band-passed white noise of variance s^2 keeps s^2 * (0.8 Hz / 5 Hz) of
  // it (Parseval, ideal band): sigma = 0.02 * 0.4 = 0.008 nT.
  m.mutable_quality()->set_residual_sigma_nt(kNoiseNt * 0.4);
  return m;
}

std::vector<double> FittedCoefficients() {
  std::vector<double> theta;
  int i = 0;
  for (const std::string& name : models::TermNames(models::TermOptions())) {
    theta.push_back(name.rfind("perm", 0) == 0  ? 3.0 * i - 20
                    : name.rfind("ind", 0) == 0 ? 1e-4 * (i - 5)
                                                : 5e-5 * (i - 11));
    ++i;
  }
  return theta;
}

std::size_t TermIndex(const std::string& name) {
  const std::vector<std::string> names =
      models::TermNames(models::TermOptions());
  for (std::size_t j = 0; j < names.size(); ++j) {
    if (names[j] == name) return j;
  }
  return names.size();
}

struct Flight {
  io::Table table;
  std::vector<double> truth;  // the earth's total field, nT
};

// A platform flying a slow circle (one turn each 400 s) with roll, pitch and
// yaw wobble inside the 0.1-0.9 Hz band, in a field of 20000 N, 1000 E,
// 45000 nT down. The interference is H = row(t) . theta(t) where
// theta(t) = theta_fit + drift(t) on term `drift_term` (physical units).
Flight Simulate(double duration_s, const std::vector<double>& theta_fit,
                std::size_t drift_term, double drift_end) {
  const std::size_t n = static_cast<std::size_t>(duration_s * kRateHz);
  const double earth[3] = {20000.0, 1000.0, 45000.0};
  const double earth_total =
      std::sqrt(20000.0 * 20000.0 + 1000.0 * 1000.0 + 45000.0 * 45000.0);
  std::vector<double> time(n), bx(n), by(n), bz(n), f(n);
  for (std::size_t i = 0; i < n; ++i) {
    const double t = static_cast<double>(i) / kRateHz;
    const double yaw =
        2 * kPi * t / 400.0 + 0.05 * std::sin(2 * kPi * 0.17 * t);
    const double pitch = 0.07 * std::sin(2 * kPi * 0.23 * t + 1.0);
    const double roll = 0.09 * std::sin(2 * kPi * 0.31 * t + 2.0);
    // Body components of the earth field: B_body = R' B_ned for the 3-2-1
    // (yaw, pitch, roll) sequence.
    const double cy = std::cos(yaw), sy = std::sin(yaw);
    const double cp = std::cos(pitch), sp = std::sin(pitch);
    const double cr = std::cos(roll), sr = std::sin(roll);
    const double r[3][3] = {
        {cy * cp, sy * cp, -sp},
        {cy * sp * sr - sy * cr, sy * sp * sr + cy * cr, cp * sr},
        {cy * sp * cr + sy * sr, sy * sp * cr - cy * sr, cp * cr}};
    time[i] = 5000.0 + t;
    bx[i] = r[0][0] * earth[0] + r[0][1] * earth[1] + r[0][2] * earth[2];
    by[i] = r[1][0] * earth[0] + r[1][1] * earth[1] + r[1][2] * earth[2];
    bz[i] = r[2][0] * earth[0] + r[2][1] * earth[1] + r[2][2] * earth[2];
    f[i] = earth_total;
  }
  models::TermEngine::Options options;
  options.sample_rate_hz = kRateHz;
  std::mt19937_64 rng(11);
  std::normal_distribution<double> noise(0.0, kNoiseNt);
  std::vector<double> noise_values(n);
  for (double& v : noise_values) v = noise(rng);
  // The induced and eddy columns scale with the measured f, which holds the
  // interference: two passes make f consistent to far below the noise.
  std::vector<double> measured = f;
  for (int pass = 0; pass < 2; ++pass) {
    const models::TermMatrix m =
        models::BuildTermMatrix(options, n, time.data(), bx.data(), by.data(),
                                bz.data(), measured.data(), {});
    for (std::size_t i = 0; i < n; ++i) {
      const double drift =
          drift_end * static_cast<double>(i) / static_cast<double>(n - 1);
      double h = 0.0;
      for (std::size_t j = 0; j < m.cols; ++j) {
        const double theta = theta_fit[j] + (j == drift_term ? drift : 0.0);
        h += m.values[i * m.cols + j] * theta;
      }
      measured[i] = f[i] + h + noise_values[i];
    }
  }
  Flight flight{io::Table({{"time", "s", ""},
                           {"bx", "nT", ""},
                           {"by", "nT", ""},
                           {"bz", "nT", ""},
                           {"f", "nT", ""}}),
                f};
  flight.table.Column("time") = time;
  flight.table.Column("bx") = bx;
  flight.table.Column("by") = by;
  flight.table.Column("bz") = bz;
  flight.table.Column("f") = measured;
  return flight;
}

struct AdaptedRun {
  io::Table out;
  AdaptSummary summary;
  std::vector<AdaptUpdate> updates;
};

AdaptedRun ApplyAdapted(const proto::CompensationModel& model,
                        const io::Table& rec, const AdaptOptions& options) {
  AdaptedRun run;
  Adapter adapter(model, options, "test model",
                  [&run](const AdaptUpdate& u) { run.updates.push_back(u); });
  io::TableReader reader(rec, "sim");
  io::TableWriter writer(OutputSchema(rec.Schema()));
  ApplyOptions apply;
  apply.chunk_rows = 1000;
  apply.observe = [&adapter](models::Compensator& c,
                             const models::CompensatedSample* s,
                             int n) { adapter.Observe(c, s, n); };
  ApplyChunked(model, reader, writer, apply);
  run.out = std::move(writer.table());
  run.summary = adapter.summary();
  return run;
}

// RMS of the band-passed error of f_comp against the earth's field over
// [from, n): the interference the compensation left in the survey band.
double BandErrorRms(const io::Table& out, const std::vector<double>& truth,
                    std::size_t from) {
  BandPass bp(BandPassOptions(), kRateHz);
  std::vector<double> e(truth.size());
  for (std::size_t i = 0; i < truth.size(); ++i) {
    e[i] = out.Column("f_comp")[i] - truth[i];
  }
  const std::vector<double> y = bp.Filter(e);
  double s = 0.0;
  for (std::size_t i = from; i < y.size(); ++i) s += y[i] * y[i];
  return std::sqrt(s / static_cast<double>(y.size() - from));
}

// A coefficient that drifts by 2.5 of its standard errors over the flight
// (ind_yy: an induced term well excited by the circle) leaves interference
// that the fixed model cannot remove; adaptation must remove most of it.
TEST(AdaptiveTest, AdaptationReducesTheResidualOfADriftingCoefficient) {
  const std::vector<double> theta = FittedCoefficients();
  const std::size_t j = TermIndex("ind_yy");
  const Flight flight = Simulate(1200.0, theta, j, 2.5 * StdError("ind_yy"));
  const proto::CompensationModel model = TestModel(theta);
  const io::Table fixed = ApplyInMemory(model, flight.table);
  const AdaptedRun adapted = ApplyAdapted(model, flight.table, AdaptOptions());
  const std::size_t from = flight.truth.size() * 2 / 3;  // last third
  const double rms_fixed = BandErrorRms(fixed, flight.truth, from);
  const double rms_adapted = BandErrorRms(adapted.out, flight.truth, from);
  std::printf(
      "band error rms, last third: fixed %.4f nT, adapted %.4f nT; "
      "ind_yy change %.2f sigma (truth at end 2.5), %zu updates\n",
      rms_fixed, rms_adapted, adapted.summary.change_sigma[j],
      adapted.summary.updates);
  // The drift must matter against the band-passed noise (0.008 nT) for the
  // test to be able to fail.
  ASSERT_GT(rms_fixed, 3.0 * kNoiseNt * 0.4);
  // Our requirement: at least a halving of the drift's residual.
  EXPECT_LT(rms_adapted, 0.5 * rms_fixed);
  // The drifting term took most of the change (truth at the end 2.5 sigma;
  // the 200 s memory lags the drift by about 0.4 sigma, and the prior pulls
  // towards the fit).
  EXPECT_GT(adapted.summary.change_sigma[j], 1.2);
  EXPECT_GT(adapted.summary.updates, 900u);
}

// A drift of 50 standard errors is clipped: the applied coefficient stops at
// bound_sigma x std_error from the fitted value, every coefficient stays
// inside its bound at every update, and the log counts the clipped term.
TEST(AdaptiveTest, EachCoefficientChangeIsClippedAtTheBound) {
  const std::vector<double> theta = FittedCoefficients();
  const std::size_t j = TermIndex("ind_yy");
  const Flight flight = Simulate(600.0, theta, j, 50.0 * StdError("ind_yy"));
  const proto::CompensationModel model = TestModel(theta);
  AdaptOptions options;
  options.bound_sigma = 2.0;
  const AdaptedRun run = ApplyAdapted(model, flight.table, options);
  ASSERT_FALSE(run.updates.empty());
  // Clipping is std::clamp to +-bound in sigma units: the product with
  // sigma and the sum with theta_fit round once each (2 ulp of theta).
  const double kRoundTol = 4e-16 * std::abs(theta[j]) + 1e-20;
  EXPECT_NEAR(run.summary.coefficients[j],
              theta[j] + options.bound_sigma * StdError("ind_yy"), kRoundTol);
  EXPECT_DOUBLE_EQ(run.summary.change_sigma[j], options.bound_sigma);
  for (std::size_t k = 0; k < theta.size(); ++k) {
    EXPECT_LE(std::abs(run.summary.change_sigma[k]), options.bound_sigma) << k;
  }
  bool clipped_logged = false;
  for (const AdaptUpdate& u : run.updates) {
    EXPECT_LE(u.largest_sigma, options.bound_sigma);
    if (u.clipped > 0 && u.largest_name == "ind_yy") clipped_logged = true;
  }
  EXPECT_TRUE(clipped_logged);
  const std::string line = Adapter::FormatUpdate(run.updates.back());
  EXPECT_NE(line.find("clipped"), std::string::npos) << line;
  EXPECT_NE(line.find("sigma"), std::string::npos) << line;
}

// With an observer that changes nothing, the output is that of apply bit
// for bit (the row copy must not disturb the engine), and so is a stream
// without --adapt.
TEST(AdaptiveTest, WithoutAdaptationTheOutputIsApplysBitForBit) {
  const std::vector<double> theta = FittedCoefficients();
  const Flight flight = Simulate(120.0, theta, 0, 0.0);
  proto::CompensationModel model = TestModel(theta);
  model.set_lag_s(0.04);
  const io::Table applied = ApplyInMemory(model, flight.table);

  io::TableReader reader(flight.table, "sim");
  io::TableWriter writer(OutputSchema(flight.table.Schema()));
  ApplyOptions apply;
  std::size_t seen = 0;
  apply.observe = [&seen](models::Compensator&,
                          const models::CompensatedSample*,
                          int n) { seen += static_cast<std::size_t>(n); };
  ApplyChunked(model, reader, writer, apply);
  const io::Table observed = writer.table();
  ASSERT_EQ(seen, flight.table.rows());

  const std::string in_path = ::testing::TempDir() + "adaptive_test_in.csv";
  const std::string out_path = ::testing::TempDir() + "adaptive_test_out.csv";
  io::WriteRecording(in_path, flight.table);
  const int in_fd = ::open(in_path.c_str(), O_RDONLY);
  const int out_fd =
      ::open(out_path.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
  ASSERT_GE(in_fd, 0);
  ASSERT_GE(out_fd, 0);
  StreamOptions stream;  // adapt is off by default
  EXPECT_FALSE(stream.adapt);
  ServeStream(model, in_fd, out_fd, "test", stream);
  ::close(in_fd);
  ::close(out_fd);
  const io::Table streamed = io::ReadRecording(out_path);
  const io::Table applied_csv = [&] {
    // The stream went through CSV text: compare with apply on the same text.
    return ApplyInMemory(model, io::ReadRecording(in_path));
  }();

  ASSERT_EQ(observed.rows(), applied.rows());
  ASSERT_EQ(streamed.rows(), applied.rows());
  for (std::size_t i = 0; i < applied.rows(); ++i) {
    // Same arithmetic in the same order: equality, not a tolerance.
    ASSERT_EQ(observed.Column("f_comp")[i], applied.Column("f_comp")[i]) << i;
    ASSERT_EQ(observed.Column("flags")[i], applied.Column("flags")[i]) << i;
    // The stream's CSV text against apply on the same text (stream_test's
    // acceptance bound).
    ASSERT_NEAR(streamed.Column("f_comp")[i], applied_csv.Column("f_comp")[i],
                1e-9)
        << i;
  }
}

// The demo compensation box fitted (as `fluxtrim fit flights/demo_box.csv`)
// and the demo validation box flown with the same aircraft afterwards, with
// the simulation's truth (flights/truth): nothing drifts between them.
struct Demo {
  proto::CompensationModel model;
  io::Table validation;
  std::vector<double> ambient;  // f_ambient of the truth file, nT
};

const Demo& DemoData() {
  static const Demo demo = [] {
    const std::string dir = std::string(FLUXTRIM_SOURCE_DIR) + "/flights/";
    Demo d;
    const FitResult fit = FitModel(io::ReadRecording(dir + "demo_box.csv"));
    if (!fit.usable) throw std::runtime_error("demo fit: " + fit.message);
    d.model = ModelFromFit(fit, {});
    d.validation = io::ReadRecording(dir + "demo_validation_box.csv");
    d.ambient = io::ReadRecording(dir + "truth/demo_validation_box_truth.csv")
                    .Column("f_ambient");
    return d;
  }();
  return demo;
}

// A device switching on at time t_on: the permanent field changes by
// `step` (nT, body axes), f += step . c with c = B/|B| from the fluxgate.
io::Table WithPermanentStep(const io::Table& rec, double t_on,
                            const double step[3]) {
  io::Table out = rec;
  const std::vector<double>& t = rec.Column("time");
  std::vector<double>& f = out.Column("f");
  for (std::size_t i = 0; i < t.size(); ++i) {
    if (t[i] < t_on) continue;
    const double b[3] = {rec.Column("bx")[i], rec.Column("by")[i],
                         rec.Column("bz")[i]};
    const double norm = std::sqrt(b[0] * b[0] + b[1] * b[1] + b[2] * b[2]);
    f[i] += (step[0] * b[0] + step[1] * b[1] + step[2] * b[2]) / norm;
  }
  return out;
}

// On a stationary platform (no drift) adaptation must not degrade a
// well-fitted model: the band-passed error against the truth stays within
// 10 % of the fixed model's (our requirement; the first thing an operator
// tests). Before the level was carried over across updates it was 6.6
// times the fixed model's (0.0132 against 0.0020 nT, measured).
TEST(AdaptiveTest, WithoutDriftTheDemoValidationBoxIsNotDegraded) {
  const Demo& demo = DemoData();
  const io::Table fixed = ApplyInMemory(demo.model, demo.validation);
  const AdaptedRun run =
      ApplyAdapted(demo.model, demo.validation, AdaptOptions());
  const double rms_fixed = BandErrorRms(fixed, demo.ambient, 0);
  const double rms_adapted = BandErrorRms(run.out, demo.ambient, 0);
  std::printf(
      "demo validation box, no drift: fixed %.5f nT, adapted %.5f nT, "
      "largest change %.2f sigma, %zu updates\n",
      rms_fixed, rms_adapted, run.summary.largest_sigma, run.summary.updates);
  ASSERT_GT(run.summary.updates, 300u);  // it did adapt
  EXPECT_LT(rms_adapted, 1.10 * rms_fixed);
}

// The permanent field changes 100 s into the validation box (a device
// switched on) by a few standard errors, inside the default bound: from
// 50 s after the switch on, adaptation must at least halve the fixed
// model's band-passed error (our requirement).
TEST(AdaptiveTest, AdaptationFollowsAPermanentStepWithinTheBound) {
  const Demo& demo = DemoData();
  const double t_on = demo.validation.Column("time").front() + 100.0;
  const double step[3] = {0.08, -0.05, 0.4};  // nT: 2.4, 2.6, 1.4 sigma
  const io::Table rec = WithPermanentStep(demo.validation, t_on, step);
  const io::Table fixed = ApplyInMemory(demo.model, rec);
  const AdaptedRun run = ApplyAdapted(demo.model, rec, AdaptOptions());
  const std::size_t from = 1500;  // t_on + 50 s at 10 Hz
  const double rms_fixed = BandErrorRms(fixed, demo.ambient, from);
  const double rms_adapted = BandErrorRms(run.out, demo.ambient, from);
  const double rms_before = BandErrorRms(
      ApplyInMemory(demo.model, demo.validation), demo.ambient, from);
  std::printf(
      "permanent step (0.08, -0.05, 0.4) nT: fixed %.5f nT, adapted "
      "%.5f nT (no step %.5f)\n",
      rms_fixed, rms_adapted, rms_before);
  ASSERT_GT(rms_fixed, 2.0 * rms_before);  // the step matters
  EXPECT_LT(rms_adapted, 0.5 * rms_fixed);
}

// A device of a few nT is 60-80 standard errors of perm_x and perm_y: the
// default bound (3 sigma) stops the adaptation there and the log says so
// (clipped); with the bound raised to 100 sigma it follows, at least
// halving the error again (our requirement).
TEST(AdaptiveTest, ALargePermanentStepIsClippedUnlessTheBoundAllowsIt) {
  const Demo& demo = DemoData();
  const double t_on = demo.validation.Column("time").front() + 100.0;
  const double step[3] = {2.0, -1.5, 3.0};  // nT
  const io::Table rec = WithPermanentStep(demo.validation, t_on, step);
  const io::Table fixed = ApplyInMemory(demo.model, rec);
  const AdaptedRun bounded = ApplyAdapted(demo.model, rec, AdaptOptions());
  AdaptOptions wide;
  wide.bound_sigma = 100.0;
  const AdaptedRun followed = ApplyAdapted(demo.model, rec, wide);
  const std::size_t from = 1500;  // t_on + 50 s at 10 Hz
  const double rms_fixed = BandErrorRms(fixed, demo.ambient, from);
  const double rms_bounded = BandErrorRms(bounded.out, demo.ambient, from);
  const double rms_followed = BandErrorRms(followed.out, demo.ambient, from);
  std::printf(
      "permanent step (2, -1.5, 3) nT: fixed %.5f nT, adapted %.5f nT "
      "(bound 3 sigma), %.5f nT (bound 100 sigma)\n",
      rms_fixed, rms_bounded, rms_followed);
  EXPECT_GT(bounded.updates.back().clipped, 0);
  EXPECT_LT(rms_followed, 0.5 * rms_fixed);
  EXPECT_LT(rms_followed, 0.5 * rms_bounded);
}

TEST(AdaptiveTest, RefusesAModelWithoutResidualSigmaOrStandardErrors) {
  const std::vector<double> theta = FittedCoefficients();
  proto::CompensationModel model = TestModel(theta);
  model.mutable_quality()->set_residual_sigma_nt(0.0);
  EXPECT_THROW(Adapter(model, AdaptOptions(), "m.txt", {}), io::InputError);
  model = TestModel(theta);
  for (proto::Coefficient& c : *model.mutable_coefficients())
    c.set_std_error(0);
  EXPECT_THROW(Adapter(model, AdaptOptions(), "m.txt", {}), io::InputError);
  AdaptOptions bad;
  bad.drift_sigma_per_min = -1.0;
  std::string why;
  EXPECT_FALSE(bad.IsValid(&why));
  EXPECT_THROW(Adapter(TestModel(theta), bad, "m.txt", {}),
               std::invalid_argument);
}

using test_support::HaveScipy;

// The causal filter against scipy.signal.sosfilt with
// zi = sosfilt_zi(sos) * x[0], the sections from scipy.signal.butter (SciPy
// via /usr/bin/python3).
TEST(AdaptiveTest, CausalBandPassMatchesScipySosfilt) {
  if (!HaveScipy()) GTEST_SKIP() << FLUXTRIM_PYTHON << " has no scipy";
  const std::string script =
      "import numpy as np, scipy.signal as s\n"
      "t = np.arange(600) / 10.0\n"
      "x = 100 + np.sin(2*np.pi*0.3*t) + 0.5*np.sin(2*np.pi*0.05*t) + "
      "0.2*np.sin(2*np.pi*2.0*t)\n"
      "sos = s.butter(4, [0.1, 0.9], btype='bandpass', fs=10.0, output='sos')\n"
      "y = s.sosfilt(sos, x, zi=s.sosfilt_zi(sos) * x[0])[0]\n"
      "print(' '.join(repr(v) for v in y))\n";
  const std::string path = ::testing::TempDir() + "adaptive_test_sosfilt.py";
  {
    std::FILE* f = std::fopen(path.c_str(), "w");
    ASSERT_NE(f, nullptr);
    std::fputs(script.c_str(), f);
    std::fclose(f);
  }
  const test_support::CommandResult run =
      test_support::RunCommand(std::string(FLUXTRIM_PYTHON) + " " + path);
  ASSERT_NE(run.code, -1);
  std::istringstream in(run.output);
  std::vector<double> expected;
  double v;
  while (in >> v) expected.push_back(v);
  ASSERT_EQ(expected.size(), 600u);

  const BandPass bp(BandPassOptions(), kRateHz);
  CausalBandPass filter(bp, 2);
  // Channel 1 carries the same signal negated: channels are independent.
  double max_error = 0.0;
  for (std::size_t i = 0; i < 600; ++i) {
    const double t = static_cast<double>(i) / 10.0;
    const double x = 100 + std::sin(2 * kPi * 0.3 * t) +
                     0.5 * std::sin(2 * kPi * 0.05 * t) +
                     0.2 * std::sin(2 * kPi * 2.0 * t);
    const double in2[2] = {x, -x};
    double out2[2];
    filter.Step(in2, out2);
    max_error = std::max(max_error, std::abs(out2[0] - expected[i]));
    EXPECT_EQ(out2[1], -out2[0]) << i;
  }
  // The sections agree with SciPy's to ~1e-15 (butterworth_test); scipy
  // starts from zi * 100 and rounds the 100 nT level at every step, ~1e-14
  // each, through poles within 0.06 of z = 1 (gain ~ 20): 1e-11 is ample.
  constexpr double kTol = 1e-11;
  EXPECT_LT(max_error, kTol);
  filter.Reset();
  EXPECT_EQ(filter.samples(), 0u);
}

}  // namespace
}  // namespace fluxtrim::core
