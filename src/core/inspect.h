#pragma once
// What a recording holds before anything is fitted: rate, gaps, channels,
// time order, field sanity (against the 20,000-70,000 nT span of the main
// field and, given a date, against WMM2025), maneuvers and excitation.

#include <limits>
#include <string>

#include "io/table.h"
#include "proto/inspect.pb.h"
#include "src/core/excitation.h"

namespace fluxtrim::core {

struct InspectOptions {
  // Decimal year of the flight for the WMM comparison; NaN: no comparison.
  double decimal_year = std::numeric_limits<double>::quiet_NaN();
  // A time step longer than gap_factor x the median step is a gap.
  double gap_factor = 1.5;
  // Plausible total field at the Earth's surface (WMM2025 test values span
  // about 22,000-67,000 nT); outside this band means units or scaling.
  double min_plausible_nT = 20000.0;
  double max_plausible_nT = 70000.0;
  // Detect maneuvers (core::DetectManeuvers: attitude, else fluxgate
  // heading) and run the excitation check (core::AnalyseExcitation: terms,
  // band, derivative as the fit). Both need bx, by, bz.
  bool maneuvers = true;
  ExcitationOptions excitation;
};

// recording must have been read with TimeOrderPolicy::kAccept so that
// backward and duplicate times are counted rather than refused.
proto::InspectSummary Inspect(const io::Table& recording,
                              const std::string& file,
                              const InspectOptions& options = {});

// Human-readable report of the summary.
std::string FormatInspectSummary(const proto::InspectSummary& summary);

}  // namespace fluxtrim::core
