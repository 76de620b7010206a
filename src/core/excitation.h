#pragma once
// Excitation check of a compensation flight before any fit: how strongly the
// maneuvers moved each Tolles-Lawson term inside the fit's band, and which
// terms the recording cannot determine.
//
// Steps (the data-only part of FitModel's determination, fit.h step 6,
// with the same thresholds):
//  1. Term matrix with models::BuildTermMatrix (c = B/|B|, body frame x
//     forward, y starboard, z down; Bt = f, or |B| without a scalar sensor),
//     runs of good samples without the k derivative-less samples at each
//     end, each run band-passed (zero-phase Butterworth, as the fit), and
//     edge_trim_s dropped at both ends of a run (filter transients).
//  2. Per term group (permanent, induced, eddy, one group per aux channel):
//     singular values of the band-passed columns of the group, in the
//     columns' own units divided by sqrt(rows), i.e. RMS: permanent "1"
//     (direction cosine), induced "nT" (Bt c_i c_j), eddy "nT/s"
//     (Bt c_i c'_j), aux the channel's unit. A coefficient of one unit
//     along a singular direction changes the band-passed field by that
//     singular value (nT RMS). Small values relative to the largest mark
//     combinations the maneuvers did not excite.
//  3. Undetermined terms, one at a time (the worst first), as the fit
//     holds them: no band-pass energy; a combination of term shapes
//     (columns without Bt, de-meaned, unit RMS) with relative singular
//     value below shape_null_singular_value (excited only together with
//     other terms: the Bt-scaled column would vary only with Bt); a
//     direction of the equilibrated band-passed matrix below
//     kNullSingularValue (fit.h); then, with the residual noise of a plain
//     least-squares fit of the band-passed field on the free terms (no
//     ridge, no lag, no robust loss: a slightly pessimistic noise where the
//     scalar sensor lags), a standard error above undetermined_fraction of
//     the term's plausible range, a term whose plausible largest value
//     would change the band-passed field by less than that noise, or an
//     implausible value. Plausible ranges as in the fit: permanent 20,000
//     nT, induced 0.2, eddy 5 ms, aux 20,000 nT / channel RMS.
//
// The fit (ridge, lag, robust loss) may hold a slightly different set; this
// is the check to run before flying home.

#include <cstddef>
#include <limits>
#include <string>
#include <vector>

#include "io/table.h"
#include "models/tolles_lawson.h"
#include "src/core/butterworth.h"
#include "src/core/fit.h"

namespace fluxtrim::core {

struct ExcitationOptions {
  models::TermOptions terms;  // default: the 16-term set
  // Derivative half-width k (samples); 0 = round(0.2 s * rate), at least 1.
  int derivative_half_width = 0;
  BandPassOptions band;     // 4th order, 0.1-0.9 Hz, as the fit
  double gap_factor = 1.5;  // step > gap_factor / rate is a gap
  // Samples dropped at each end of a filtered run (s); 0 = 0.5 / low_hz.
  double edge_trim_s = 0.0;
  // The fit's thresholds (fit.h).
  double shape_null_singular_value = kShapeNullSingularValue;
  double undetermined_fraction = kUndeterminedFraction;
  // Row subsampling of the shape analysis (it only looks for exact
  // dependences, so every sample is not needed).
  std::size_t max_shape_rows = 20000;
  // Longer recordings are not analysed (usable = false, message says so):
  // the check holds the term matrix twice (2 x 8 x terms bytes per sample,
  // 512 MB for 2 M samples of 16 terms). 0: no limit.
  std::size_t max_samples = 2000000;
  std::string source = "recording";  // for error messages

  bool IsValid(std::string* error) const;
};

struct TermExcitation {
  std::string name;
  std::string group;  // permanent, induced, eddy, aux_<col>
  std::string unit;   // of the coefficient: nT, 1, s, nT/unit
  // RMS of the band-passed column (column units, see step 2).
  double band_rms = 0;
  // RMS of the part of the band-passed column that the other free terms
  // cannot explain (column units); NaN for a held term.
  double independent_rms = std::numeric_limits<double>::quiet_NaN();
  // 1-sigma standard error of the coefficient (coefficient units) from the
  // plain least-squares fit of step 3; NaN for a held term.
  double std_error = std::numeric_limits<double>::quiet_NaN();
  double plausible_bound = 0;  // coefficient units
  bool determined = true;
  std::string reason;  // why not determined
};

struct GroupExcitation {
  std::string group;
  std::string column_unit;  // "1", "nT", "nT/s", aux unit
  std::vector<std::string> terms;
  std::vector<double> singular_values;  // RMS, descending
  std::vector<std::string> undetermined_terms;
};

struct ExcitationSummary {
  // False when the recording is too short or too gappy (fewer band-passed
  // rows than the fit needs: 20 per term and five periods of the band's
  // lower edge); message says why. Everything else is then empty.
  bool usable = false;
  std::string message;
  double sample_rate_hz = 0;
  int derivative_half_width = 0;
  std::size_t rows = 0;      // band-passed samples analysed
  std::string field_source;  // "f" or "|B|"
  double residual_rms_nT = std::numeric_limits<double>::quiet_NaN();
  std::vector<TermExcitation> terms;  // TermNames order
  std::vector<GroupExcitation> groups;

  std::vector<std::string> UndeterminedTerms() const;
};

// Throws io::InputError (naming options.source) when time, bx, by, bz or an
// aux channel is missing, std::invalid_argument for invalid options.
ExcitationSummary AnalyseExcitation(const io::Table& recording,
                                    const ExcitationOptions& options = {});

}  // namespace fluxtrim::core
