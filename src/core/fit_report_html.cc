#include "src/core/fit_report_html.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <map>
#include <stdexcept>

#include "src/core/excitation.h"

namespace fluxtrim::core {
namespace {

std::vector<double> ColumnOrEmpty(const io::Table& t, const char* name) {
  return t.Has(name) ? t.Column(name) : std::vector<double>();
}

std::string HeadingLabel(double heading_deg) {
  char text[16];
  std::snprintf(text, sizeof text, "%03.0f°", heading_deg);
  return text;
}

}  // namespace

ReportData FitReportData(const FitResult& fit, const io::Table& recording,
                         const std::string& file,
                         const std::string& model_file) {
  ReportData data;
  data.command = "fit";
  data.input_file = file;
  data.model_file = model_file;
  data.term_set = models::TermSetName(fit.engine.terms);
  data.term_count = static_cast<int>(fit.term_names.size());
  data.band_low_hz = fit.band.low_hz;
  data.band_high_hz = fit.band.high_hz;
  data.sample_rate_hz = fit.engine.sample_rate_hz;
  data.duration_s = fit.end_s - fit.start_s;
  data.lag_s = fit.lag_s;
  data.derivative_half_width = fit.engine.half_width;
  data.fom_before_nT = fit.fom_before_nT;
  data.fom_after_nT = fit.fom_after_nT;
  data.improvement_ratio = fit.improvement_ratio;
  char text[128];
  std::snprintf(text, sizeof text, "%.4f -> %.4f", fit.band_rms_before_nT,
                fit.band_rms_after_nT);
  data.extra_summary.push_back({"band-passed RMS (nT)", text});
  std::snprintf(text, sizeof text, "%.3g", fit.condition_number);
  data.extra_summary.push_back({"condition number", text});
  data.extra_summary.push_back({"maneuvers from", fit.maneuver_source});

  // One panel per heading, spanning its maneuvers with 10 s either side.
  std::map<long, std::pair<double, double>> spans;
  for (const ManeuverMetric& m : fit.maneuvers) {
    const long key = std::lround(m.maneuver.heading_deg);
    auto it = spans.find(key);
    if (it == spans.end()) {
      spans[key] = {m.maneuver.start_s, m.maneuver.end_s};
    } else {
      it->second.first = std::min(it->second.first, m.maneuver.start_s);
      it->second.second = std::max(it->second.second, m.maneuver.end_s);
    }
  }
  for (const auto& [heading, span] : spans) {
    ReportPanel panel;
    panel.title = "Heading " + HeadingLabel(static_cast<double>(heading));
    for (std::size_t i = 0; i < fit.time.size(); ++i) {
      if (fit.time[i] < span.first - 10 || fit.time[i] > span.second + 10) continue;
      panel.time_s.push_back(fit.time[i]);
      panel.before.push_back(fit.band_before[i]);
      panel.after.push_back(fit.band_after[i]);
    }
    for (const ManeuverMetric& m : fit.maneuvers) {
      if (std::lround(m.maneuver.heading_deg) != heading) continue;
      panel.spans.push_back({m.maneuver.start_s, m.maneuver.end_s,
                             ManeuverKindName(m.maneuver.kind)});
    }
    data.panels.push_back(std::move(panel));
  }
  for (const ManeuverMetric& m : fit.maneuvers) {
    data.maneuvers.push_back({HeadingLabel(m.maneuver.heading_deg),
                              ManeuverKindName(m.maneuver.kind),
                              m.pp_before_nT, m.pp_after_nT});
  }
  for (const CrossValidationFold& f : fit.cross_validation) {
    data.cross_validation.push_back({HeadingLabel(f.heading_deg), f.fom_nT});
  }
  for (const FitCoefficient& c : fit.coefficients) {
    data.coefficients.push_back({c.name, c.value, c.std_error});
  }
  // Per-group excitation: singular values of the band-passed term columns,
  // the same analysis `inspect` prints. The report goes on without the plot
  // when the recording cannot be analysed.
  try {
    ExcitationOptions eo;
    eo.terms = fit.engine.terms;
    eo.derivative_half_width = fit.engine.half_width;
    eo.band = fit.band;
    eo.gap_factor = fit.engine.gap_factor;
    eo.source = file;
    for (const GroupExcitation& g : AnalyseExcitation(recording, eo).groups) {
      data.excitation.push_back({g.group, g.singular_values});
    }
  } catch (const std::exception& e) {
    data.warnings.push_back(std::string("excitation check skipped: ") + e.what());
  }
  // Spectrum: the total field before and after (not band-passed).
  const std::vector<double> field = recording.Has("f")
                                        ? recording.Column("f")
                                        : std::vector<double>();
  if (!field.empty() && field.size() == fit.interference.size()) {
    data.spectrum_before = field;
    data.spectrum_after.resize(field.size());
    for (std::size_t i = 0; i < field.size(); ++i) {
      data.spectrum_after[i] = field[i] - fit.interference[i];
    }
  }
  data.time_s = recording.Column("time");
  data.roll_deg = ColumnOrEmpty(recording, "roll");
  data.pitch_deg = ColumnOrEmpty(recording, "pitch");
  data.heading_deg = ColumnOrEmpty(recording, "heading");
  data.lat_deg = ColumnOrEmpty(recording, "lat");
  data.lon_deg = ColumnOrEmpty(recording, "lon");
  data.warnings = fit.warnings;
  return data;
}

}  // namespace fluxtrim::core
