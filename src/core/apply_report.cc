#include "src/core/apply_report.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace fluxtrim::core {
namespace {

std::vector<double> ColumnOrEmpty(const io::Table& t, const char* name) {
  return t.Has(name) ? t.Column(name) : std::vector<double>();
}

}  // namespace

ReportData ApplyReportData(const proto::CompensationModel& model,
                           const std::string& model_file,
                           const io::Table& out,
                           const ApplySummaryResult& summary) {
  const proto::ApplySummary& s = summary.proto;
  ReportData data;
  data.command = "apply";
  data.input_file = s.file();
  data.model_file = model_file;
  data.term_set = model.terms().set();
  data.term_count = model.coefficients_size();
  data.band_low_hz = model.filter().low_hz();
  data.band_high_hz = model.filter().high_hz();
  data.sample_rate_hz = s.sample_rate_hz();
  data.lag_s = model.lag_s();
  data.derivative_half_width = model.derivative_half_width();
  data.improvement_ratio = s.improvement_ratio();
  if (s.maneuvers_size() > 0) {
    data.fom_before_nT = s.fom_before_nt();
    data.fom_after_nT = s.fom_after_nt();
  }
  char text[128];
  std::snprintf(text, sizeof text, "%.4f -> %.4f", s.band_rms_before_nt(),
                s.band_rms_after_nt());
  data.extra_summary.push_back({"band-passed RMS (nT)", text});
  data.extra_summary.push_back(
      {"flagged samples", std::to_string(s.flagged_samples())});
  for (const proto::ReciprocalLines& r : s.heading_error()) {
    std::snprintf(text, sizeof text, "%.3f -> %.3f",
                  r.heading_error_before_nt(), r.heading_error_after_nt());
    char label[96];
    std::snprintf(label, sizeof label, "heading error %03.0f/%03.0f deg (nT)",
                  r.heading_a_deg(), r.heading_b_deg());
    data.extra_summary.push_back({label, text});
  }

  const auto& t = out.Column("time");
  const std::size_t n = out.rows();
  if (n > 0) data.duration_s = t[n - 1] - t[0];
  // Panels: up to six equal time windows of the recording.
  const std::size_t panels = std::clamp<std::size_t>(n / 3000 + 1, 1, 6);
  for (std::size_t p = 0; p < panels; ++p) {
    const std::size_t b = n * p / panels, e = n * (p + 1) / panels;
    if (e <= b) continue;
    ReportPanel panel;
    std::snprintf(text, sizeof text, "%.0f-%.0f s", t[b], t[e - 1]);
    panel.title = text;
    panel.time_s.assign(t.begin() + static_cast<std::ptrdiff_t>(b),
                        t.begin() + static_cast<std::ptrdiff_t>(e));
    panel.before.assign(summary.band_before.begin() + static_cast<std::ptrdiff_t>(b),
                        summary.band_before.begin() + static_cast<std::ptrdiff_t>(e));
    panel.after.assign(summary.band_after.begin() + static_cast<std::ptrdiff_t>(b),
                       summary.band_after.begin() + static_cast<std::ptrdiff_t>(e));
    for (const proto::ManeuverSummary& m : s.maneuvers()) {
      if (m.end_s() >= t[b] && m.start_s() <= t[e - 1]) {
        panel.spans.push_back({m.start_s(), m.end_s(), m.kind()});
      }
    }
    data.panels.push_back(std::move(panel));
  }
  for (const proto::ManeuverSummary& m : s.maneuvers()) {
    std::snprintf(text, sizeof text, "%03.0f°", m.heading_deg());
    data.maneuvers.push_back({text, m.kind(), m.pp_before_nt(), m.pp_after_nt()});
  }
  for (const proto::Coefficient& c : model.coefficients()) {
    data.coefficients.push_back({c.name(), c.value(), c.std_error()});
  }
  const auto& f_comp = out.Column("f_comp");
  const auto& f_int = out.Column("f_interference");
  data.spectrum_after = f_comp;
  data.spectrum_before.resize(n);
  for (std::size_t i = 0; i < n; ++i) data.spectrum_before[i] = f_comp[i] + f_int[i];
  data.time_s = t;
  data.roll_deg = ColumnOrEmpty(out, "roll");
  data.pitch_deg = ColumnOrEmpty(out, "pitch");
  data.heading_deg = ColumnOrEmpty(out, "heading");
  data.lat_deg = ColumnOrEmpty(out, "lat");
  data.lon_deg = ColumnOrEmpty(out, "lon");
  data.warnings.assign(s.warnings().begin(), s.warnings().end());
  return data;
}

}  // namespace fluxtrim::core
