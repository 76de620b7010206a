// Tolles-Lawson fit on simulated flights (src/core/scenario.h: platform
// physics, not the fitted formula run backwards).
#include "src/core/fit.h"

#include <algorithm>
#include <cmath>
#include <map>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "io/error.h"

#include "src/core/metrics.h"
#include "src/core/scenario.h"
#include "tests/core/fit_test_util.h"

namespace fluxtrim::core {
namespace {

using testing::AircraftBoxText;
using testing::BandPassedCompensated;
using testing::BoxScenario;

// Maneuvers from the simulator's truth (kinds 1 pitch, 2 roll, 3 yaw).
std::vector<Maneuver> TruthManeuvers(const SimulatedFlight& flight) {
  std::vector<Maneuver> out;
  for (const SegmentTruth& s : flight.segments) {
    if (s.kind < 1 || s.kind > 3) continue;
    Maneuver m;
    m.heading_deg = s.heading_deg;
    m.kind = s.kind == 1 ? ManeuverKind::kPitch
                         : (s.kind == 2 ? ManeuverKind::kRoll : ManeuverKind::kYaw);
    m.start_s = s.start_s;
    m.end_s = s.end_s;
    out.push_back(m);
  }
  return out;
}

double RmsWhere(const std::vector<double>& x, const std::vector<double>& mask) {
  double s = 0;
  std::size_t n = 0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    if (std::isfinite(x[i]) && std::isfinite(mask[i])) {
      s += x[i] * x[i];
      ++n;
    }
  }
  return n ? std::sqrt(s / static_cast<double>(n)) : NAN;
}

// Band-pass of a truth series over the stretches where the fit has values.
std::vector<double> BandPassLike(const FitResult& fit, const std::vector<double>& x) {
  const BandPass bp(fit.band, fit.engine.sample_rate_hz);
  std::vector<double> masked(x.size(), NAN);
  for (std::size_t i = 0; i < x.size(); ++i) {
    if (std::isfinite(fit.band_before[i])) masked[i] = x[i];
  }
  return bp.FilterWithGaps(masked);
}

class SimulatedBox : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    BoxScenario s;
    flight_ = new SimulatedFlight(SimulateScenarioText(AircraftBoxText(s), "box"));
    FitOptions options;
    options.source = "box";
    fit_ = new FitResult(FitModel(flight_->recording, options));
  }
  static void TearDownTestSuite() {
    delete fit_;
    delete flight_;
  }
  static SimulatedFlight* flight_;
  static FitResult* fit_;
};
SimulatedFlight* SimulatedBox::flight_ = nullptr;
FitResult* SimulatedBox::fit_ = nullptr;

TEST_F(SimulatedBox, FitIsUsableAndFindsTheTwelveManeuvers) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  EXPECT_EQ(fit_->maneuvers.size(), 12u);
  EXPECT_EQ(fit_->coefficients.size(), 16u);
  for (const auto& w : fit_->warnings) ADD_FAILURE() << "unexpected warning: " << w;
}

TEST_F(SimulatedBox, BandPassedResidualIsAtTheInjectedNoiseLevel) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  // Acceptance (issue 4): residual RMS <= 1.5 x the band-passed injected
  // scalar noise over the same samples. The noise is the simulator's truth
  // channel noise_f; the 1.5 allows for fluxgate noise in the terms and the
  // second-order field the linear model leaves (|d|^2 / 2|B|).
  const std::vector<double> noise =
      BandPassLike(*fit_, flight_->truth.Column("noise_f"));
  const double noise_rms = RmsWhere(noise, fit_->band_after);
  const double residual_rms = RmsWhere(fit_->band_after, noise);
  RecordProperty("noise_rms_nT", std::to_string(noise_rms));
  RecordProperty("residual_rms_nT", std::to_string(residual_rms));
  EXPECT_GT(noise_rms, 0.0);
  EXPECT_LE(residual_rms, 1.5 * noise_rms)
      << "residual " << residual_rms << " nT, noise " << noise_rms << " nT";
}

TEST_F(SimulatedBox, FigureOfMeritDropsTwentyfold) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  // Acceptance (issue 4): FOM after <= FOM before / 20.
  EXPECT_GT(fit_->fom_before_nT, 0.0);
  EXPECT_LE(20.0 * fit_->fom_after_nT, fit_->fom_before_nT)
      << "FOM " << fit_->fom_before_nT << " -> " << fit_->fom_after_nT;
  EXPECT_GT(fit_->improvement_ratio, 10.0);
}

TEST_F(SimulatedBox, EstimatedInterferenceMatchesTheTruth) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  // Acceptance (issue 4): band-passed (estimate - truth) RMS <= 3 x the
  // band-passed noise RMS. Truth: f_interference_true of the simulator.
  const auto& truth = flight_->truth.Column("f_interference_true");
  std::vector<double> diff(truth.size(), NAN);
  for (std::size_t i = 0; i < truth.size(); ++i) {
    diff[i] = fit_->interference[i] - truth[i];
  }
  const std::vector<double> band_diff = BandPassLike(*fit_, diff);
  const std::vector<double> noise =
      BandPassLike(*fit_, flight_->truth.Column("noise_f"));
  const double noise_rms = RmsWhere(noise, fit_->band_after);
  const double error_rms = RmsWhere(band_diff, fit_->band_after);
  EXPECT_LE(error_rms, 3.0 * noise_rms)
      << "interference error " << error_rms << " nT, noise " << noise_rms;
}

TEST_F(SimulatedBox, MetricsAgreeWithAnIndependentEvaluation) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  // Apply the coefficients with the term builder and the band-pass directly
  // (tests/core/fit_test_util.h) and compare the FOM (metrics.h).
  const std::size_t trim = static_cast<std::size_t>(
      std::ceil(std::max(0.5 / fit_->band.low_hz, 2.0) * fit_->engine.sample_rate_hz));
  const std::vector<double> after = BandPassedCompensated(
      flight_->recording, fit_->engine, fit_->band, fit_->values, fit_->lag_s, trim);
  std::vector<Maneuver> maneuvers;
  for (const auto& m : fit_->maneuvers) maneuvers.push_back(m.maneuver);
  const auto metrics = ManeuverPeakToPeak(fit_->time, fit_->band_before, after, maneuvers);
  // The two differ only in where the band-pass starts (the fit filters the
  // terms, this filters their difference; the filter is linear), so only
  // rounding and edge transients separate them: 5% of the FOM.
  EXPECT_NEAR(Fom(metrics, true), fit_->fom_after_nT, 0.05 * fit_->fom_after_nT);
}

TEST_F(SimulatedBox, CrossValidationReportsEveryHeading) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  ASSERT_EQ(fit_->cross_validation.size(), 4u);
  for (const auto& fold : fit_->cross_validation) {
    EXPECT_EQ(fold.maneuvers, 3u);
    ASSERT_TRUE(std::isfinite(fold.fom_nT)) << fold.heading_deg;
    // Left out, a heading is predicted less well than when fitted, but far
    // better than uncompensated (the model generalises across headings).
    EXPECT_LT(fold.fom_nT, 0.25 * fold.fom_before_nT) << fold.heading_deg;
  }
}

TEST_F(SimulatedBox, CoefficientsCarryUnitsAndFiniteStandardErrors) {
  ASSERT_TRUE(fit_->usable) << fit_->message;
  std::map<std::string, std::string> units;
  for (const auto& c : fit_->coefficients) {
    units[c.name] = c.unit;
    EXPECT_TRUE(std::isfinite(c.value)) << c.name;
    EXPECT_TRUE(std::isfinite(c.std_error) && c.std_error > 0) << c.name;
    EXPECT_FALSE(c.held) << c.name << ": " << c.note;
  }
  EXPECT_EQ(units["perm_x"], "nT");
  EXPECT_EQ(units["ind_xy"], "1");
  EXPECT_EQ(units["eddy_zx"], "s");
}

TEST(Fit, LagOfTheScalarSensorIsRecovered) {
  BoxScenario s;
  s.lag_s = 0.15;
  const SimulatedFlight flight = SimulateScenarioText(AircraftBoxText(s), "lag");
  const FitResult fit = FitModel(flight.recording);
  ASSERT_TRUE(fit.usable) << fit.message;
  ASSERT_TRUE(fit.lag_estimated);
  // The simulator delays the scalar reading by exactly 0.15 s. A lag error
  // d leaves a residual ~ d * dH/dt; 5 ms is well below the 100 ms sample
  // step and within a few standard errors.
  EXPECT_NEAR(fit.lag_s, 0.15, 0.005);
  EXPECT_LT(fit.lag_std_error_s, 0.005);
  EXPECT_LE(20.0 * fit.fom_after_nT, fit.fom_before_nT);
}

TEST(Fit, HuberLossKeepsTheFitGoodUnderSpikes) {
  BoxScenario clean_s;
  BoxScenario spiky_s;
  spiky_s.spike_fraction = 0.01;
  spiky_s.spike_amplitude_nT = 50.0;
  const SimulatedFlight clean = SimulateScenarioText(AircraftBoxText(clean_s), "clean");
  const SimulatedFlight spiky = SimulateScenarioText(AircraftBoxText(spiky_s), "spiky");
  const FitResult clean_fit = FitModel(clean.recording);
  FitOptions robust;
  robust.loss = RobustLoss::kHuber;
  const FitResult huber_fit = FitModel(spiky.recording, robust);
  ASSERT_TRUE(clean_fit.usable) << clean_fit.message;
  ASSERT_TRUE(huber_fit.usable) << huber_fit.message;
  // Judge both coefficient sets on the spike-free recording (the spikes
  // themselves would dominate any FOM measured on the spiky one).
  std::vector<Maneuver> maneuvers = TruthManeuvers(clean);
  const std::size_t trim = 60;
  auto fom = [&](const FitResult& f) {
    const auto after = BandPassedCompensated(clean.recording, f.engine, f.band,
                                             f.values, f.lag_s, trim);
    return Fom(ManeuverPeakToPeak(clean_fit.time, after, after, maneuvers), true);
  };
  const double fom_clean = fom(clean_fit);
  const double fom_huber = fom(huber_fit);
  // Acceptance (issue 4): within 1.3 x the spike-free fit.
  EXPECT_LE(fom_huber, 1.3 * fom_clean) << fom_huber << " vs " << fom_clean;
  // And plain least squares on the spiky data is clearly worse (the test
  // can fail: spikes matter).
  const FitResult plain_fit = FitModel(spiky.recording);
  ASSERT_TRUE(plain_fit.usable);
  EXPECT_GT(fom(plain_fit), fom_huber);
}

TEST(Fit, FullTermSetHoldsTheRedundantTermsAndFitsAsWellAsTheDefault) {
  const SimulatedFlight flight = SimulateScenarioText(AircraftBoxText({}), "box");
  FitOptions full;
  full.terms.full = true;
  const FitResult f18 = FitModel(flight.recording, full);
  const FitResult f16 = FitModel(flight.recording);
  ASSERT_TRUE(f18.usable) << f18.message;
  ASSERT_TRUE(f16.usable) << f16.message;
  std::map<std::string, FitCoefficient> c;
  for (const auto& k : f18.coefficients) c[k.name] = k;
  // sum c_i^2 = 1 exactly (Tolles & Lawson 1950): ind_zz adds nothing the
  // other induced shapes do not have, so it is held and named.
  EXPECT_TRUE(c["ind_zz"].held);
  bool named = false;
  for (const auto& w : f18.warnings) named = named || w.find("ind_zz") != std::string::npos;
  EXPECT_TRUE(named);
  // sum c_i c'_i = 0 (Leliak 1961) holds only up to the discrete
  // derivative's error, so eddy_zz is either held or its gauge (trace of
  // the eddy matrix = 0, weight 1e3 sqrt(n) against the data) is imposed.
  if (!c["eddy_zz"].held) {
    const double trace = c["eddy_xx"].value + c["eddy_yy"].value + c["eddy_zz"].value;
    const double size = std::fabs(c["eddy_xx"].value) + std::fabs(c["eddy_yy"].value) +
                        std::fabs(c["eddy_zz"].value);
    EXPECT_LT(std::fabs(trace), 1e-4 * size);
  }
  // Same interference space up to terms the band-pass removes: same FOM
  // within 10%.
  EXPECT_NEAR(f18.fom_after_nT, f16.fom_after_nT, 0.1 * f16.fom_after_nT);
}

TEST(Fit, FluxgateOnlyRecordingUsesTheFluxgateMagnitudeAndNoLag) {
  BoxScenario s;
  s.scalar = false;
  const SimulatedFlight flight = SimulateScenarioText(AircraftBoxText(s), "nof");
  ASSERT_FALSE(flight.recording.Has("f"));
  const FitResult fit = FitModel(flight.recording);
  ASSERT_TRUE(fit.usable) << fit.message;
  EXPECT_EQ(fit.field_source, "|B|");
  EXPECT_FALSE(fit.lag_estimated);
  EXPECT_EQ(fit.lag_s, 0.0);
  // The fluxgate sees the platform field too, so |B| carries the
  // interference; its noise is 0.05 nT per axis, ten times the scalar's:
  // a tenfold drop is what it can give.
  EXPECT_LE(10.0 * fit.fom_after_nT, fit.fom_before_nT);
}

TEST(Fit, GroundVehicleLoopHoldsTheTermsItCannotSee) {
  const SimulatedFlight flight =
      SimulateScenarioText(testing::VehicleLoopText(), "vehicle");
  FitOptions options;
  // A vehicle flies no maneuvers: the operator gives each leg as a segment.
  for (const SegmentTruth& s : flight.segments) {
    Maneuver m;
    m.heading_deg = s.heading_deg;
    m.kind = ManeuverKind::kYaw;
    m.start_s = s.start_s;
    m.end_s = s.end_s;
    options.maneuvers.push_back(m);
  }
  if (options.maneuvers.empty()) {
    const auto& t = flight.recording.Column("time");
    Maneuver m;
    m.kind = ManeuverKind::kYaw;
    m.start_s = t.front();
    m.end_s = t.back();
    options.maneuvers.push_back(m);
  }
  options.maneuvers_given = true;
  const FitResult fit = FitModel(flight.recording, options);
  ASSERT_TRUE(fit.usable) << fit.message;
  std::size_t held = 0;
  for (const auto& c : fit.coefficients) {
    if (c.held) {
      ++held;
      // Named in a warning.
      bool named = false;
      for (const auto& w : fit.warnings) named = named || w.find(c.name) != std::string::npos;
      EXPECT_TRUE(named) << c.name;
      // Held at ~0 (prior weight 1e3 sqrt(n): a millionth of the data's
      // pull) in physical units well inside any plausible range.
      EXPECT_LT(std::fabs(c.value), 1e-3 * (c.unit == "nT" ? 2e4 : (c.unit == "1" ? 0.2 : 0.005)))
          << c.name;
    }
    // Physical plausibility (the bounds fit.cc uses, our judgement):
    // permanent 20,000 nT, induced 0.2, eddy 0.005 s.
    const double bound = c.unit == "nT" ? 2e4 : (c.unit == "1" ? 0.2 : 0.005);
    EXPECT_LE(std::fabs(c.value), bound) << c.name << " = " << c.value;
  }
  // Level driving leaves the vertical and the sum-of-squares directions
  // unexcited: some terms must be held.
  EXPECT_GE(held, 1u);
}

TEST(Fit, RecordingWithoutManeuversIsRefusedWithAdvice) {
  const std::string text =
      "name: \"line\"\nseed: 3\ndate: \"2025-06-14\"\n"
      "start_lat_deg: -31.95 start_lon_deg: 141.45 start_alt_m: 2800\n"
      "platform { kind: AIRCRAFT permanent_nT { x: 5 } }\n"
      "sensors { scalar { } }\n"
      "survey_lines { line_count: 1 line_length_m: 30000 }\n";
  const SimulatedFlight flight = SimulateScenarioText(text, "line");
  const FitResult fit = FitModel(flight.recording);
  EXPECT_FALSE(fit.usable);
  EXPECT_NE(fit.message.find("--segments"), std::string::npos) << fit.message;
  EXPECT_NE(fit.message.find("pitch, roll and yaw"), std::string::npos);
}

TEST(Fit, TooShortARecordingIsRefused) {
  const SimulatedFlight flight = SimulateScenarioText(AircraftBoxText({}), "box");
  io::Table cut = flight.recording;
  cut.Slice(0, 300);  // 30 s at 10 Hz
  const FitResult fit = FitModel(cut);
  EXPECT_FALSE(fit.usable);
  EXPECT_NE(fit.message.find("longer"), std::string::npos) << fit.message;
}

TEST(Fit, RecordingWithTooManyGapsIsRefused) {
  const SimulatedFlight flight = SimulateScenarioText(AircraftBoxText({}), "box");
  io::Table holes = flight.recording;
  auto& f = holes.Column("f");
  for (std::size_t i = 0; i < f.size(); ++i) {
    if ((i / 50) % 3 == 0) f[i] = NAN;  // a third of the samples
  }
  const FitResult fit = FitModel(holes);
  EXPECT_FALSE(fit.usable);
  EXPECT_NE(fit.message.find("repair"), std::string::npos) << fit.message;
}

TEST(Fit, MissingChannelsAreAnInputErrorNamingThem) {
  io::Table t({{"time", "s", ""}, {"bx", "nT", ""}, {"f", "nT", ""}});
  try {
    FitModel(t);
    FAIL() << "expected io::InputError";
  } catch (const io::InputError& e) {
    const std::string what = e.what();
    EXPECT_NE(what.find("by"), std::string::npos) << what;
    EXPECT_NE(what.find("bz"), std::string::npos) << what;
  }
}

TEST(Fit, DefaultDerivativeHalfWidthIsTwoTenthsOfASecond) {
  // round(0.2 s * rate), at least 1 (the default).
  EXPECT_EQ(DefaultDerivativeHalfWidth(10.0), 2);
  EXPECT_EQ(DefaultDerivativeHalfWidth(100.0), 20);
  EXPECT_EQ(DefaultDerivativeHalfWidth(1.0), 1);
  EXPECT_EQ(DefaultDerivativeHalfWidth(20.0), 4);
}

TEST(Fit, RobustLossNamesRoundTrip) {
  for (RobustLoss l : {RobustLoss::kNone, RobustLoss::kHuber, RobustLoss::kCauchy}) {
    RobustLoss back;
    ASSERT_TRUE(ParseRobustLoss(RobustLossName(l), &back));
    EXPECT_EQ(back, l);
  }
  RobustLoss unused;
  EXPECT_FALSE(ParseRobustLoss("tukey", &unused));
}

}  // namespace
}  // namespace fluxtrim::core
