#pragma once
// Figures that prove a compensation on data it was not fitted to: the
// band-passed RMS before and after and the improvement ratio; the FOM table
// when the recording holds maneuvers (a validation box); the heading error
// of reciprocal survey lines.

#include <string>
#include <vector>

#include "io/table.h"
#include "proto/apply_summary.pb.h"
#include "proto/model.pb.h"
#include "src/core/butterworth.h"

namespace fluxtrim::core {

struct ApplySummaryResult {
  proto::ApplySummary proto;
  // Band-passed series, aligned with the output table's rows (NaN where not
  // filtered): for reports.
  std::vector<double> band_before, band_after;
};

// output: the table written by apply (input channels plus f_comp,
// f_interference, flags).
ApplySummaryResult SummariseApply(const proto::CompensationModel& model,
                                  const io::Table& output,
                                  const std::string& file);

std::string FormatApplySummary(const ApplySummaryResult& summary);

// Band-passes each run of samples that is contiguous in time (no step over
// gap_factor / rate) and finite; other samples and runs too short for the
// filter come out NaN.
std::vector<double> BandPassRuns(const BandPass& filter,
                                 const std::vector<double>& time,
                                 const std::vector<double>& x,
                                 double sample_rate_hz,
                                 double gap_factor = 1.5);

}  // namespace fluxtrim::core
