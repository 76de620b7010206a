#pragma once
// Tolles-Lawson compensation fit (Tolles & Lawson 1950; Leliak 1961) of a
// compensation flight, solved with Ceres.
//
// Steps (FitModel):
//  1. Term matrix with models::BuildTermMatrix (the one term builder shared
//     with apply and stream): c = B/|B| (body frame x forward, y starboard,
//     z down), c' by the centred derivative of half-width k, Bt = f (or |B|
//     without a scalar sensor). Induced and eddy columns carry the factor
//     Bt, so induced coefficients are dimensionless and eddy ones seconds.
//  2. Segments: runs of good samples (finite time, fluxgate, field and aux;
//     the time step within (0, gap_factor/rate]). The first and last k
//     samples of a run have no derivative and are not used; the rest is
//     band-passed (zero-phase Butterworth, default 4th order 0.1-0.9 Hz),
//     the measured field and every term column alike. Runs shorter than the
//     filter's minimum length are skipped; edge_trim samples at each end of
//     a filtered run (filter transients, lag interpolation) are not fitted.
//  3. Equilibration: each band-passed column is scaled to unit RMS over the
//     fitted rows (conditioning; coefficients are reported in physical
//     units). Columns without band-pass energy are held at 0.
//  4. Lag (scalar sensor only): a coarse grid of lags within +-max_lag_s,
//     scored by the least-squares residual, then refined jointly with the
//     coefficients in Ceres using a ceres::CubicInterpolator over the
//     band-passed field. The scalar field is then shifted by the lag
//     (ShiftByLag, lag.h) and band-passed again.
//  5. Ridge: lambda per sample in equilibrated units, fixed or chosen by
//     generalised cross-validation (ridge.h).
//  6. Solve with Ceres (least_squares.h); standard errors from
//     ceres::Covariance scaled by the white-noise variance behind the
//     band-passed residual (residual variance / sum g_k^2 of the filter's
//     impulse response: the band-pass correlates the residuals). Terms the
//     data cannot determine are held at 0 (fixed in the solve: an infinitely
//     strong prior) and named in a warning, one at a time, the worst first:
//     a combination of term shapes (columns without the Bt factor) with
//     relative singular value below 1e-4 (not excited independently: its
//     Bt-scaled column would vary only with Bt and fit the field with
//     itself), a direction of the equilibrated matrix below
//     kNullSingularValue, a term whose plausible largest value would change
//     the band-passed field by less than the residual, a standard error
//     above 1% of the plausible range, or an implausible value (permanent
//     20,000 nT, induced 0.2, eddy 5 ms).
//     `full` (18 terms): the trace of the induced and of the eddy matrix is
//     fixed at 0 by a soft constraint (sum c_i^2 = 1 and sum c_i c'_i = 0
//     make it undetermined) unless one of its terms is held.
//  7. Robust loss (optional): Huber or Cauchy by iterated pseudo-
//     observations (Huber 1981, Robust Statistics, sec. 7.8): the raw
//     residual's high-frequency part (residual minus the median of its
//     neighbours) beyond the loss's knee is removed from the field before
//     band-passing, and the fit repeated. Working on the raw residual keeps
//     a spike local; after the band-pass it would ring over seconds and no
//     per-sample loss could isolate it. Scale: 1.4826 x MAD of the
//     residuals times 1.345 (Huber) or 2.385 (Cauchy), common practice.
//  8. Metrics (metrics.h): per-maneuver peak-to-peak of the band-passed
//     field before and after, FOM, improvement ratio, band RMS; and
//     leave-one-heading-out cross-validation.

#include <cstddef>
#include <limits>
#include <string>
#include <vector>

#include "io/table.h"
#include "models/tolles_lawson.h"
#include "src/core/butterworth.h"
#include "src/core/maneuvers.h"
#include "src/core/metrics.h"

namespace fluxtrim::core {

enum class RobustLoss { kNone, kHuber, kCauchy };
const char* RobustLossName(RobustLoss loss);  // "none", "huber", "cauchy"
bool ParseRobustLoss(const std::string& text, RobustLoss* loss);

// Relative singular value below which a direction of the equilibrated,
// band-passed matrix counts as null (the data say nothing about it).
inline constexpr double kNullSingularValue = 1e-6;

// When a term counts as determined by a recording: shared by the fit and
// the excitation check of `inspect` (excitation.h), so the two agree.
// Directions of the term shapes (columns without the Bt factor, de-meaned,
// unit RMS) with a relative singular value below kShapeNullSingularValue
// were not excited independently by the flight.
inline constexpr double kShapeNullSingularValue = 1e-4;
// Plausible magnitude of each kind of coefficient (our judgement of the
// physics, for aircraft, drones and vehicles; generous on purpose): a
// permanent field beyond 20,000 nT at the sensor, an induced field beyond
// 20% of the Earth's field, or an eddy coefficient beyond 5 ms (50 nT of
// eddy field for a direction-cosine rate of 0.2/s in a 50,000 nT field,
// ten times the largest eddy fields of survey aircraft) would be a
// platform no compensation could fix. Aux terms: their contribution
// beyond 20,000 nT.
inline constexpr double kMaxPermanentNT = 20000.0;
inline constexpr double kMaxInduced = 0.2;
inline constexpr double kMaxEddyS = 0.005;
// A term whose standard error exceeds this fraction of its plausible range
// (200 nT, 0.002, 50 us) is not determined by the flight.
inline constexpr double kUndeterminedFraction = 0.01;

// The inputs of the term columns in a recording: the scalar channel f when
// it holds at least one finite value (else null: |B| is the total field),
// the aux channels and their RMS over finite samples (which scales the
// plausible range of an aux coefficient). Shared by the fit and inspect.
struct TermInputs {
  const double* f = nullptr;
  std::vector<const double*> aux;
  std::vector<double> aux_rms;
};
TermInputs SelectTermInputs(const io::Table& table,
                            const std::vector<std::string>& aux_names);

struct FitOptions {
  models::TermOptions terms;            // default: the 16-term set
  // Derivative half-width k (samples); 0 = round(0.2 s * rate), at least 1.
  int derivative_half_width = 0;
  BandPassOptions band;                 // 4th order, 0.1-0.9 Hz
  double gap_factor = 1.5;              // step > gap_factor/rate is a gap
  // Ridge: GCV when ridge_auto, else the fixed lambda `ridge` (per sample,
  // equilibrated units, >= 0).
  bool ridge_auto = true;
  double ridge = 0.0;
  RobustLoss loss = RobustLoss::kNone;
  // Lag of the scalar sensor (see lag.h for the sign); ignored without f.
  bool estimate_lag = true;
  double max_lag_s = 1.0;
  // Samples dropped at each end of a filtered run (s); 0 = automatic:
  // max(0.5 / low_hz, max_lag_s + 2 samples).
  double edge_trim_s = 0.0;
  // Maneuvers for the metrics; when empty (and maneuvers_given is false)
  // they are detected with DetectManeuvers.
  std::vector<Maneuver> maneuvers;
  bool maneuvers_given = false;
  std::string maneuver_source;           // shown in the summary when given
  bool cross_validate = true;
  // Refuse a recording with more than this fraction of samples flagged or
  // missing (gaps, non-finite values).
  double max_flagged_fraction = 0.2;
  // Name used in error messages (file name).
  std::string source = "recording";
  // Threads of the fit: with 2 or more, maneuver detection runs beside the
  // term matrix and band-pass; 1 keeps everything on the calling thread.
  // The results are the same either way.
  int threads = 2;

  bool IsValid(std::string* error) const;
};

struct FitCoefficient {
  std::string name;
  std::string unit;        // "nT", "1", "s", "nT/unit"
  double value = 0;        // physical units
  double std_error = 0;    // 1 sigma; for a held term it reflects the prior
  bool held = false;
  std::string note;        // why it was held
};

struct CrossValidationFold {
  double heading_deg = 0;  // held-out heading
  std::size_t maneuvers = 0;
  double fom_before_nT = std::numeric_limits<double>::quiet_NaN();
  // FOM of the held-out maneuvers compensated with coefficients fitted on
  // the other headings only.
  double fom_nT = std::numeric_limits<double>::quiet_NaN();
  // The same maneuvers with the full fit, for comparison.
  double fom_full_fit_nT = std::numeric_limits<double>::quiet_NaN();
};

struct FitResult {
  // False when the recording cannot support a fit; message says what to fly
  // or fix. Everything else is then partial.
  bool usable = false;
  std::string message;

  models::TermEngine::Options engine;  // terms, k, rate, gap factor
  BandPassOptions band;                // as used (upper edge after clipping)
  std::vector<std::string> term_names;
  std::vector<FitCoefficient> coefficients;
  std::vector<double> values;          // coefficient values, physical units

  double lag_s = 0, lag_std_error_s = 0;
  bool lag_estimated = false;
  double interference_mean_nT = 0;     // mean of H over the good samples

  // Quality figures.
  double fom_before_nT = std::numeric_limits<double>::quiet_NaN();
  double fom_after_nT = std::numeric_limits<double>::quiet_NaN();
  double improvement_ratio = std::numeric_limits<double>::quiet_NaN();
  double band_rms_before_nT = std::numeric_limits<double>::quiet_NaN();
  double band_rms_after_nT = std::numeric_limits<double>::quiet_NaN();
  double condition_number = std::numeric_limits<double>::quiet_NaN();
  double ridge_lambda = 0;
  std::string ridge_method;            // "gcv" or "fixed"
  double residual_sigma_nT = 0;        // band-passed residual std deviation
  double noise_gain = 1;               // sum g_k^2 of the zero-phase filter
  std::size_t samples_used = 0;        // fitted rows
  std::string loss = "none";
  double loss_scale_nT = 0;            // tuning constant x robust sigma
  std::vector<ManeuverMetric> maneuvers;
  std::string maneuver_source;
  std::vector<CrossValidationFold> cross_validation;
  std::vector<std::string> warnings;

  // Inputs seen.
  std::string field_source;            // "f" or "|B|"
  std::size_t samples = 0;
  double start_s = 0, end_s = 0;
  bool attitude_present = false;
  double roll_min_deg = 0, roll_max_deg = 0;
  double pitch_min_deg = 0, pitch_max_deg = 0;

  // Per-sample series (one per recording row; NaN where not computed):
  // band-passed field before and after compensation (nT) and the modelled
  // interference H (nT, raw, not band-passed).
  std::vector<double> time;
  std::vector<double> band_before;
  std::vector<double> band_after;
  std::vector<double> interference;
};

// Fits the model. Throws io::InputError for missing channels (naming them
// and options.source) and std::invalid_argument for invalid options. A
// recording that cannot support a fit returns usable = false.
FitResult FitModel(const io::Table& recording, const FitOptions& options = {});

// Default derivative half-width for a rate: round(0.2 s * rate), >= 1.
int DefaultDerivativeHalfWidth(double sample_rate_hz);

// Nominal sample rate: 1 / median of the positive finite time steps.
// Throws io::InputError (naming source) with fewer than two such steps.
double EstimateSampleRate(const std::vector<double>& time,
                          const std::string& source);

// Unit of a term's coefficient: "nT" (perm), "1" (ind), "s" (eddy),
// "nT/unit" (aux).
std::string TermUnit(const std::string& term_name);

}  // namespace fluxtrim::core
