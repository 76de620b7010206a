#pragma once
// What `fluxtrim fit` shows: the terminal summary (maneuver table, FOM, IR,
// condition number, lag, warnings, the flight caution) and the
// --summary-json message.

#include <string>

#include "proto/summary.pb.h"
#include "src/core/fit.h"

namespace fluxtrim::core {

proto::FitSummary SummaryFromFit(const FitResult& fit, const std::string& file,
                                 const std::string& model_file,
                                 const std::string& tool_version);

// Multi-line text for a terminal. Rows of the maneuver table are headings
// (deg), columns pitch, roll, yaw; each cell "before -> after" (nT, the
// peak-to-peak of the band-passed field; several maneuvers of one kind at
// one heading are summed, as in the FOM).
std::string FormatFitSummary(const FitResult& fit, const std::string& file);

}  // namespace fluxtrim::core
