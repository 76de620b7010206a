#include "src/core/report.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <ctime>
#include <fstream>
#include <map>
#include <sstream>
#include <stdexcept>

#include "fluxtrim/version.h"
#include "src/core/cautions.h"
#include "src/core/svg.h"

namespace fluxtrim::core {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Palette (our own, report.h): warm terracotta for "before", deep blue for
// "after", pale tints for maneuver kinds, distinct hues per term group.
constexpr const char* kBefore = kReportColourBefore;
constexpr const char* kAfter = kReportColourAfter;
constexpr const char* kPitchTint = "#f6e7c8";
constexpr const char* kRollTint = "#d8ecdc";
constexpr const char* kYawTint = "#e4ddf1";
constexpr const char* kOtherTint = "#e9edf1";
constexpr const char* kRoll = kReportColourRoll;
constexpr const char* kPitch = kReportColourPitch;
constexpr const char* kHeading = kReportColourHeading;
constexpr const char* kTrack = kReportColourTrack;

// Plot sizes (px) for a 1000 px content column: two columns of 492.
constexpr double kHalfWidth = 492.0;
constexpr double kFullWidth = 1000.0;
// Full-width plots shrink to about 70 % on A4 paper: a larger font keeps
// their text near 7 pt there.
constexpr double kFullWidthFontPx = 12.5;

const char* GroupColour(const std::string& group) {
  if (group == "permanent") return kReportColourPermanent;
  if (group == "induced") return kReportColourInduced;
  if (group == "eddy") return kReportColourEddy;
  if (group == "aux") return kReportColourAux;
  return "#4f5d75";
}

const char* SpanTint(const std::string& label) {
  std::string l;
  for (char c : label) l += static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  if (l.find("pitch") != std::string::npos) return kPitchTint;
  if (l.find("roll") != std::string::npos) return kRollTint;
  if (l.find("yaw") != std::string::npos) return kYawTint;
  return kOtherTint;
}

std::string Esc(const std::string& s) { return EscapeXml(s); }

// Significant-digit formatting; "n/a" for non-finite values.
std::string Sig(double v, int digits = 3) {
  if (!std::isfinite(v)) return "n/a";
  if (v == 0.0) return "0";
  const double a = std::fabs(v);
  char buffer[64];
  if (a >= 1e-3 && a < 1e6) {
    const int e = static_cast<int>(std::floor(std::log10(a)));
    const int decimals = std::max(0, digits - 1 - e);
    std::snprintf(buffer, sizeof buffer, "%.*f", decimals, v);
  } else {
    std::snprintf(buffer, sizeof buffer, "%.*e", std::max(0, digits - 1), v);
    // "2.10e-04" -> "2.10e-4": shorter, same value.
    std::string out = buffer;
    const std::size_t e = out.find('e');
    if (e != std::string::npos) {
      std::string mantissa = out.substr(0, e), exponent = out.substr(e + 1);
      std::string sign = (exponent[0] == '-') ? "-" : "";
      std::size_t p = (exponent[0] == '-' || exponent[0] == '+') ? 1 : 0;
      while (p + 1 < exponent.size() && exponent[p] == '0') ++p;
      out = mantissa + "e" + sign + exponent.substr(p);
    }
    return out;
  }
  return buffer;
}

std::string Fixed(double v, int decimals) {
  if (!std::isfinite(v)) return "n/a";
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%.*f", decimals, v);
  return buffer;
}

std::string OrNa(const std::string& s) { return s.empty() ? "n/a" : s; }

double StdDev(const std::vector<double>& v) {
  double sum = 0.0, sum2 = 0.0;
  std::size_t n = 0;
  for (double x : v) {
    if (!std::isfinite(x)) continue;
    sum += x;
    ++n;
  }
  if (n < 2) return kNaN;
  const double mean = sum / static_cast<double>(n);
  for (double x : v) {
    if (std::isfinite(x)) sum2 += (x - mean) * (x - mean);
  }
  return std::sqrt(sum2 / static_cast<double>(n - 1));
}

std::string NowUtc() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buffer[32];
  std::strftime(buffer, sizeof buffer, "%Y-%m-%d %H:%M UTC", &tm);
  return buffer;
}

std::string Duration(double s) {
  if (!std::isfinite(s)) return "n/a";
  const long total = std::lround(s);
  char buffer[64];
  if (total >= 3600) {
    std::snprintf(buffer, sizeof buffer, "%ld h %02ld min %02ld s (%.0f s)",
                  total / 3600, (total % 3600) / 60, total % 60, s);
  } else if (total >= 60) {
    std::snprintf(buffer, sizeof buffer, "%ld min %02ld s (%.0f s)",
                  total / 60, total % 60, s);
  } else {
    std::snprintf(buffer, sizeof buffer, "%.1f s", s);
  }
  return buffer;
}

// Time axis: seconds since the origin, or minutes for long records.
struct TimeAxis {
  double origin = 0.0;
  double scale = 1.0;  // divide seconds by this
  std::string label = "time since start (s)";
  std::vector<double> Map(const std::vector<double>& t) const {
    std::vector<double> out(t.size());
    for (std::size_t i = 0; i < t.size(); ++i) out[i] = (t[i] - origin) / scale;
    return out;
  }
  double Map(double t) const { return (t - origin) / scale; }
};

TimeAxis MakeTimeAxis(const ReportData& d) {
  double lo = std::numeric_limits<double>::infinity();
  double hi = -lo;
  auto scan = [&](const std::vector<double>& t) {
    for (double v : t) {
      if (std::isfinite(v)) {
        lo = std::min(lo, v);
        hi = std::max(hi, v);
      }
    }
  };
  scan(d.time_s);
  for (const auto& p : d.panels) scan(p.time_s);
  TimeAxis axis;
  axis.origin = std::isfinite(d.time_origin_s) ? d.time_origin_s
                : (lo <= hi)                    ? lo
                                                : 0.0;
  if (lo <= hi && hi - axis.origin > 1800.0) {
    axis.scale = 60.0;
    axis.label = "time since start (min)";
  }
  return axis;
}

// Breaks a heading trace where it wraps through north so the line does not
// cross the whole plot.
void WrapBreaks(const std::vector<double>& t, const std::vector<double>& h,
                std::vector<double>* t_out, std::vector<double>* h_out) {
  const std::size_t n = std::min(t.size(), h.size());
  for (std::size_t i = 0; i < n; ++i) {
    if (i > 0 && std::isfinite(h[i]) && std::isfinite(h[i - 1]) &&
        std::fabs(h[i] - h[i - 1]) > 180.0) {
      t_out->push_back(kNaN);
      h_out->push_back(kNaN);
    }
    t_out->push_back(t[i]);
    double v = h[i];
    if (std::isfinite(v)) v = std::fmod(std::fmod(v, 360.0) + 360.0, 360.0);
    h_out->push_back(v);
  }
}

struct Writer {
  std::ostringstream html;
  int section = 0;

  void Section(const std::string& id, const std::string& title) {
    ++section;
    html << "<section id=\"" << Esc(id) << "\">\n<h2><span class=\"num\">"
         << section << "</span>" << Esc(title) << "</h2>\n";
  }
  void EndSection() { html << "</section>\n"; }
  void Figure(const std::string& svg, const std::string& caption,
              const std::string& css = "") {
    html << "<figure" << (css.empty() ? "" : " class=\"" + css + "\"") << ">\n"
         << svg;
    if (!caption.empty()) html << "<figcaption>" << caption << "</figcaption>\n";
    html << "</figure>\n";
  }
  void Note(const std::string& text) {
    html << "<p class=\"note\">" << Esc(text) << "</p>\n";
  }
};

const char* kCss = R"CSS(
:root { --ink: #1f2933; --muted: #52606d; --rule: #d9dee4; --accent: #1b4965;
  --before: #c8553d; --after: #1b4965; --tint: #f4f6f8; --warn: #b7791f; }
* { box-sizing: border-box; }
html { background: #e9edf1; }
body { margin: 0; color: var(--ink);
  font: 14px/1.45 'DejaVu Sans', 'Liberation Sans', Arial, sans-serif; }
.page { width: 1040px; max-width: 100%; margin: 24px auto; background: #fff;
  padding: 0 20px 28px; box-shadow: 0 1px 4px rgba(31, 41, 51, 0.18); }
header.masthead { background: var(--accent); color: #fff; margin: 0 -20px 18px;
  padding: 18px 20px 16px; }
header.masthead .brand { font-size: 12px; letter-spacing: 0.14em;
  text-transform: uppercase; opacity: 0.8; }
header.masthead h1 { margin: 2px 0 4px; font-size: 24px; font-weight: 600; }
header.masthead .sub { font-size: 13px; opacity: 0.9; }
h2 { font-size: 17px; margin: 26px 0 10px; padding-bottom: 4px;
  border-bottom: 2px solid var(--rule); }
h2 .num { display: inline-block; min-width: 1.6em; color: var(--accent); }
h3 { font-size: 14px; margin: 14px 0 6px; }
.kpis { display: grid; grid-template-columns: repeat(5, minmax(0, 1fr));
  gap: 10px; margin-bottom: 14px; }
.kpi { background: var(--tint); border-left: 4px solid var(--accent);
  padding: 8px 12px; }
.kpi.before { border-left-color: var(--before); }
.kpi.after { border-left-color: var(--after); }
.kpi .label { font-size: 12px; color: var(--muted); }
.kpi .value { font-size: 22px; font-weight: 600; white-space: nowrap; }
.kpi .unit { font-size: 13px; font-weight: 400; color: var(--muted); }
.cols { display: grid; grid-template-columns: minmax(0, 1fr) minmax(0, 1fr);
  gap: 12px 16px; align-items: start; }
.grid2 { display: grid; grid-template-columns: repeat(2, minmax(0, 1fr));
  gap: 14px 16px; }
.stack { display: grid; gap: 14px; }
figure { margin: 0; break-inside: avoid; }
.grid2 + figure, figure + .grid2, .grid2 + .grid2 { margin-top: 14px; }
figcaption { font-size: 12px; color: var(--muted); margin-top: 3px; }
svg.plot { display: block; max-width: 100%; height: auto;
  border: 1px solid var(--rule); }
table { border-collapse: collapse; font-size: 13px; }
th, td { padding: 3px 10px; border-bottom: 1px solid var(--rule);
  text-align: left; vertical-align: top; overflow-wrap: anywhere; }
th { color: var(--muted); font-weight: 600; }
table.kv th { width: 36%; font-weight: 400; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums;
  white-space: nowrap; }
tr.total td { font-weight: 600; border-top: 2px solid var(--rule); }
.swatch { display: inline-block; width: 10px; height: 10px;
  margin-right: 5px; vertical-align: baseline; }
.caution { background: #fdf6e7; border-left: 4px solid var(--warn);
  padding: 8px 12px; margin: 8px 0; font-size: 13px; }
ul.warnings { margin: 4px 0; padding-left: 20px; }
ul.warnings li { margin: 2px 0; }
p.note { color: var(--muted); font-style: italic; font-size: 13px; }
p.lead { color: var(--muted); font-size: 13px; margin: 4px 0 10px; }
footer { margin-top: 28px; padding-top: 8px; border-top: 1px solid var(--rule);
  font-size: 12px; color: var(--muted); }
@page { size: A4; margin: 12mm; }
@media print {
  html, body { background: #fff; font-size: 10pt; }
  .page { width: auto; margin: 0; padding: 0; box-shadow: none; }
  header.masthead { margin: 0 0 12px; }
  h2 { break-after: avoid; }
  /* One plot per row on paper keeps plot text near 8 pt. */
  .grid2, .fig-cols { grid-template-columns: minmax(0, 1fr); }
  .grid2 > figure, .fig-cols > figure { justify-self: center; }
  figure, table, .kpis, .caution { break-inside: avoid; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
)CSS";

void WriteSummary(Writer& w, const ReportData& d) {
  auto kpi = [&](const char* css, const char* label, const std::string& value,
                 const char* unit) {
    w.html << "<div class=\"kpi " << css << "\"><div class=\"label\">" << label
           << "</div><div class=\"value\">" << Esc(value);
    if (unit[0] != '\0' && value != "n/a") {
      w.html << " <span class=\"unit\">" << unit << "</span>";
    }
    w.html << "</div></div>\n";
  };
  const double fom_ratio = d.fom_before_nT / d.fom_after_nT;
  const bool has_fom = std::isfinite(d.fom_before_nT) ||
                       std::isfinite(d.fom_after_nT) || !d.maneuvers.empty();
  w.html << "<div class=\"kpis\">\n";
  if (has_fom) {
    kpi("before", "FOM before", Sig(d.fom_before_nT), "nT");
    kpi("after", "FOM after", Sig(d.fom_after_nT), "nT");
    kpi("", "FOM reduction", std::isfinite(fom_ratio) ? Sig(fom_ratio) : "n/a",
        "&#215;");
  } else {
    // Survey lines have no maneuvers: the band-passed scatter is the figure.
    std::vector<double> before, after;
    for (const auto& p : d.panels) {
      before.insert(before.end(), p.before.begin(), p.before.end());
      after.insert(after.end(), p.after.begin(), p.after.end());
    }
    kpi("before", "Std. dev. before", Sig(StdDev(before)), "nT");
    kpi("after", "Std. dev. after", Sig(StdDev(after)), "nT");
    kpi("", "Panels", std::to_string(d.panels.size()), "");
  }
  kpi("", "Improvement ratio", Sig(d.improvement_ratio), "");
  kpi("", "Model terms", d.term_count > 0 ? std::to_string(d.term_count) : "n/a",
      "");
  w.html << "</div>\n";

  w.html << "<div class=\"cols\">\n<div>\n<h3>Job</h3>\n<table class=\"kv\">\n";
  auto row = [&](const std::string& k, const std::string& v) {
    w.html << "<tr><th>" << Esc(k) << "</th><td>" << Esc(v) << "</td></tr>\n";
  };
  row("Command", d.command == "apply" ? "apply (compensate recording)"
                 : d.command == "fit" ? "fit (compensation model)"
                                      : OrNa(d.command));
  row("Input", OrNa(d.input_file));
  if (!d.model_file.empty()) row("Model file", d.model_file);
  row("Recording date", OrNa(d.recording_date));
  row("Platform", OrNa(d.platform));
  if (!d.operator_name.empty()) row("Operator", d.operator_name);
  std::string terms = d.term_set.empty() ? "n/a" : d.term_set;
  if (d.term_count > 0) terms += " (" + std::to_string(d.term_count) + " terms)";
  row("Model terms", terms);
  if (std::isfinite(d.band_low_hz) || std::isfinite(d.band_high_hz)) {
    row("Band-pass", Sig(d.band_low_hz) + " to " + Sig(d.band_high_hz) + " Hz");
  }
  row("Sample rate", std::isfinite(d.sample_rate_hz) ? Sig(d.sample_rate_hz) + " Hz" : "n/a");
  row("Duration", Duration(d.duration_s));
  if (d.derivative_half_width >= 0) {
    std::string k = std::to_string(d.derivative_half_width) + " samples";
    if (std::isfinite(d.sample_rate_hz) && d.sample_rate_hz > 0) {
      k += " (stream latency " + Sig(d.derivative_half_width / d.sample_rate_hz) + " s)";
    }
    row("Derivative half-width", k);
  }
  row("Scalar sensor lag", std::isfinite(d.lag_s)
                               ? Fixed(d.lag_s * 1000.0, 1) + " ms (positive: scalar reading late)"
                               : "n/a");
  if (has_fom) {
    row("FOM before / after", Sig(d.fom_before_nT) + " / " + Sig(d.fom_after_nT) + " nT");
  }
  row("Improvement ratio", Sig(d.improvement_ratio));
  for (const auto& [k, v] : d.extra_summary) row(k, v);
  w.html << "</table>\n</div>\n<div>\n<h3>Cautions</h3>\n";
  w.html << "<div class=\"caution\">" << Esc(kFlightCaution) << "</div>\n";
  if (d.ordnance_search) {
    w.html << "<div class=\"caution\">" << Esc(kOrdnanceCaution) << "</div>\n";
  }
  w.html << "<h3>Warnings</h3>\n";
  if (d.warnings.empty()) {
    w.html << "<p class=\"note\">No warnings.</p>\n";
  } else {
    w.html << "<ul class=\"warnings\">\n";
    for (const auto& s : d.warnings) w.html << "<li>" << Esc(s) << "</li>\n";
    w.html << "</ul>\n";
  }
  w.html << "</div>\n</div>\n";
}

SeriesStyle Style(const char* colour, double width = 1.4) {
  SeriesStyle s;
  s.colour = colour;
  s.line_width_px = width;
  return s;
}

void WritePanels(Writer& w, const ReportData& d, const TimeAxis& ta,
                 const ReportOptions& opt) {
  const bool maneuvers = std::any_of(d.panels.begin(), d.panels.end(),
                                     [](const ReportPanel& p) { return !p.spans.empty(); });
  w.Section("field", maneuvers ? "Band-passed field by heading"
                               : "Band-passed field, before and after");
  if (d.panels.empty()) {
    w.Note("No time panels in this job.");
    w.EndSection();
    return;
  }
  w.html << "<p class=\"lead\">Total field after the fit band-pass, before "
            "(<span class=\"swatch\" style=\"background:"
         << kBefore << "\"></span>terracotta) and after (<span class=\"swatch\" "
            "style=\"background:"
         << kAfter << "\"></span>blue) compensation."
         << (maneuvers ? " Shaded: pitch, roll and yaw maneuvers."
                       : " Grey: their difference, the interference removed.")
         << "</p>\n<div class=\"grid2\">\n";
  // One y range for every panel so headings (or lines) compare at a glance.
  double lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (const auto& p : d.panels) {
    for (const auto* v : {&p.before, &p.after}) {
      for (double x : *v) {
        if (std::isfinite(x)) {
          lo = std::min(lo, x);
          hi = std::max(hi, x);
        }
      }
    }
  }
  const AxisTicks shared = LinearTicks(lo <= hi ? lo : kNaN, lo <= hi ? hi : kNaN, 5, true);
  for (std::size_t i = 0; i < d.panels.size(); ++i) {
    const ReportPanel& p = d.panels[i];
    PlotOptions o;
    o.id = "plot-field-" + std::to_string(i);
    o.title = p.title.empty() ? "Panel " + std::to_string(i + 1) : p.title;
    o.x_label = ta.label;
    o.y_label = "field (nT)";
    o.width_px = kHalfWidth;
    o.height_px = 240.0;
    o.max_points_per_line = opt.max_points_per_line;
    o.y_min = shared.lo;
    o.y_max = shared.hi;
    o.y_tick_step = shared.step;
    SvgPlot plot(o);
    for (const auto& s : p.spans) {
      plot.AddSpan(ta.Map(s.start_s), ta.Map(s.end_s), s.label, SpanTint(s.label));
    }
    const std::vector<double> t = ta.Map(p.time_s);
    plot.AddLine("before", t, p.before, Style(kBefore, 1.2));
    plot.AddLine("after", t, p.after, Style(kAfter, 1.4));
    if (p.spans.empty()) {
      std::vector<double> removed(std::min(p.before.size(), p.after.size()));
      for (std::size_t k = 0; k < removed.size(); ++k) {
        removed[k] = p.before[k] - p.after[k];
      }
      plot.AddLine("before \xE2\x88\x92 after", t, removed,
                   Style(kReportColourRemoved, 1.2));
    }
    if (p.time_s.empty()) plot.AddNote("no samples");
    const double sb = StdDev(p.before), sa = StdDev(p.after);
    std::string caption = "Standard deviation: before " + Sig(sb) + " nT, after " +
                          Sig(sa) + " nT";
    if (std::isfinite(sb / sa)) caption += " (ratio " + Sig(sb / sa) + ")";
    if (p.spans.empty()) {
      std::vector<double> removed(std::min(p.before.size(), p.after.size()));
      for (std::size_t k = 0; k < removed.size(); ++k) {
        removed[k] = p.before[k] - p.after[k];
      }
      caption += "; removed interference " + Sig(StdDev(removed)) + " nT";
    }
    w.Figure(plot.Render(), Esc(caption) + ".");
  }
  w.html << "</div>\n";
  w.EndSection();
}

void WriteManeuvers(Writer& w, const ReportData& d) {
  if (d.maneuvers.empty() && d.cross_validation.empty()) return;
  w.Section("fom", "Figure of merit by maneuver");
  if (!d.maneuvers.empty()) {
    PlotOptions o;
    o.id = "plot-maneuvers";
    o.title = "Peak-to-peak of the band-passed field per maneuver";
    o.y_label = "peak-to-peak (nT)";
    o.width_px = kFullWidth;
    o.font_size_px = kFullWidthFontPx;
    o.height_px = 300.0;
    std::vector<std::string> kinds;
    std::vector<double> before, after;
    double lo = std::numeric_limits<double>::infinity(), hi = 0.0;
    for (const auto& m : d.maneuvers) {
      kinds.push_back(m.kind);
      before.push_back(m.p2p_before);
      after.push_back(m.p2p_after);
      for (double v : {m.p2p_before, m.p2p_after}) {
        if (std::isfinite(v) && v > 0) {
          lo = std::min(lo, v);
          hi = std::max(hi, v);
        }
      }
    }
    // Log axis when "after" would be invisible next to "before".
    const bool log_axis = lo <= hi && hi / lo > 30.0;
    if (log_axis) o.y_scale = AxisScale::kLog;
    SvgPlot plot(o);
    plot.SetCategories(kinds);
    std::size_t start = 0;
    int group = 0;
    for (std::size_t i = 1; i <= d.maneuvers.size(); ++i) {
      if (i == d.maneuvers.size() || d.maneuvers[i].heading != d.maneuvers[start].heading) {
        plot.AddSpan(start - 0.5, i - 0.5, "heading " + d.maneuvers[start].heading,
                     group % 2 ? "#ffffff" : "#f1f3f6");
        start = i;
        ++group;
      }
    }
    plot.AddBars("before compensation", before, {}, Style(kBefore));
    plot.AddBars("after compensation", after, {}, Style(kAfter));
    w.Figure(plot.Render(),
             log_axis ? "Logarithmic axis: the two series differ by more than "
                        "a factor of 30."
                      : "");

    w.html << "<div class=\"cols\">\n<div>\n<h3>Peak-to-peak per maneuver</h3>\n"
              "<table class=\"fom\">\n<tr><th>Heading</th><th>Maneuver</th>"
              "<th class=\"n\">before (nT)</th><th class=\"n\">after (nT)</th>"
              "<th class=\"n\">reduction</th></tr>\n";
    double sb = 0.0, sa = 0.0;
    bool all_b = true, all_a = true;
    for (const auto& m : d.maneuvers) {
      w.html << "<tr><td>" << Esc(m.heading) << "</td><td>" << Esc(m.kind)
             << "</td><td class=\"n\">" << Sig(m.p2p_before)
             << "</td><td class=\"n\">" << Sig(m.p2p_after)
             << "</td><td class=\"n\">" << Sig(m.p2p_before / m.p2p_after)
             << "</td></tr>\n";
      if (std::isfinite(m.p2p_before)) sb += m.p2p_before; else all_b = false;
      if (std::isfinite(m.p2p_after)) sa += m.p2p_after; else all_a = false;
    }
    const double fb = all_b ? sb : kNaN, fa = all_a ? sa : kNaN;
    w.html << "<tr class=\"total\"><td colspan=\"2\">Sum (FOM)</td><td class=\"n\">"
           << Sig(fb) << "</td><td class=\"n\">" << Sig(fa)
           << "</td><td class=\"n\">" << Sig(fb / fa) << "</td></tr>\n</table>\n";
    w.html << "<p class=\"lead\">FOM: sum of the peak-to-peak band-passed "
              "field over the maneuvers (common practice).</p>\n</div>\n<div>\n";
  } else {
    w.html << "<div class=\"cols\">\n<div>\n";
  }
  if (!d.cross_validation.empty()) {
    w.html << "<h3>Leave-one-heading-out check</h3>\n<p class=\"lead\">FOM of "
              "each heading's maneuvers compensated by a model fitted without "
              "them, next to the same maneuvers under the full fit.</p>\n"
              "<table>\n<tr><th>Held-out heading</th><th class=\"n\">held out "
              "(nT)</th><th class=\"n\">full fit (nT)</th></tr>\n";
    for (const auto& c : d.cross_validation) {
      double in_fit = 0.0;
      int found = 0;
      for (const auto& m : d.maneuvers) {
        if (m.heading == c.heading) {
          in_fit += m.p2p_after;
          ++found;
        }
      }
      w.html << "<tr><td>" << Esc(c.heading) << "</td><td class=\"n\">"
             << Sig(c.fom_nT) << "</td><td class=\"n\">"
             << (found ? Sig(in_fit) : "n/a") << "</td></tr>\n";
    }
    w.html << "</table>\n";
  }
  w.html << "</div>\n</div>\n";
  w.EndSection();
}

const std::vector<std::string>& GroupOrder() {
  static const std::vector<std::string> order = {"permanent", "induced", "eddy",
                                                 "aux", "other"};
  return order;
}

void WriteCoefficients(Writer& w, const ReportData& d) {
  if (d.coefficients.empty() && d.excitation.empty()) return;
  w.Section("coefficients", "Coefficients and excitation");
  std::map<std::string, std::vector<const ReportCoefficient*>> groups;
  for (const auto& c : d.coefficients) groups[TermGroupOf(c.name)].push_back(&c);
  if (!d.coefficients.empty()) {
    w.html << "<p class=\"lead\">Fitted coefficients with one-standard-error "
              "bars.</p>\n<div class=\"grid2\">\n";
  }
  for (const auto& g : GroupOrder()) {
    auto it = groups.find(g);
    if (it == groups.end()) continue;
    const auto& list = it->second;
    double maxabs = 0.0;
    for (const auto* c : list) {
      if (std::isfinite(c->value)) maxabs = std::max(maxabs, std::fabs(c->value));
      if (std::isfinite(c->std_error) && std::isfinite(c->value)) {
        maxabs = std::max(maxabs, std::fabs(c->value) + std::fabs(c->std_error));
      }
    }
    // Engineering scale so tick labels stay short (10^-6 for eddy seconds).
    int e3 = 0;
    if (maxabs > 0.0) {
      const int e = static_cast<int>(std::floor(std::log10(maxabs)));
      if (e < -2 || e > 3) e3 = 3 * static_cast<int>(std::floor(e / 3.0));
    }
    const double scale = std::pow(10.0, -e3);
    std::string unit = g == "permanent" ? "nT"
                       : g == "induced" ? ""
                       : g == "eddy"    ? "s"
                       : g == "aux"     ? "nT/unit"
                                        : "";
    std::string scaled_unit;
    if (e3 != 0) {
      scaled_unit = (unit.empty() ? "\xC3\x97" : "") + PowerOfTenLabel(e3) +
                    (unit.empty() ? "" : " " + unit);
    } else {
      scaled_unit = unit.empty() ? "dimensionless" : unit;
    }
    PlotOptions o;
    o.id = "plot-coef-" + g;
    o.title = (g == "permanent" ? std::string("Permanent")
               : g == "induced" ? std::string("Induced")
               : g == "eddy"    ? std::string("Eddy current")
               : g == "aux"     ? std::string("Auxiliary-channel")
                                : std::string("Other")) +
              " terms";
    o.y_label = "coefficient (" + scaled_unit + ")";
    o.width_px = kHalfWidth;
    std::size_t longest = 0;
    for (const auto* c : list) longest = std::max(longest, c->name.size());
    // Long names (aux channels) are drawn slanted: give them room.
    o.height_px = longest * list.size() > 70 ? 290.0 : 240.0;
    o.y_include_zero = true;
    SvgPlot plot(o);
    std::vector<std::string> names;
    std::vector<double> x, y, err;
    for (std::size_t i = 0; i < list.size(); ++i) {
      names.push_back(list[i]->name);
      x.push_back(static_cast<double>(i));
      y.push_back(list[i]->value * scale);
      err.push_back(list[i]->std_error * scale);
    }
    plot.SetCategories(names);
    SeriesStyle zero = Style("#9aa5b1", 1.0);
    plot.AddHorizontalLine(0.0, zero);
    SeriesStyle pts = Style(GroupColour(g));
    pts.marker_radius_px = 3.8;
    plot.AddPoints("", x, y, err, pts);
    w.Figure(plot.Render(), "");
  }
  if (!d.coefficients.empty()) w.html << "</div>\n";

  if (!d.excitation.empty()) {
    PlotOptions o;
    o.id = "plot-excitation";
    o.title = "Excitation: singular values of the band-passed terms per group";
    o.y_label = "singular value (RMS)";
    o.width_px = kFullWidth;
    o.font_size_px = kFullWidthFontPx;
    o.height_px = 260.0;
    o.y_scale = AxisScale::kLog;
    SvgPlot plot(o);
    std::vector<std::string> cats, colours;
    std::vector<double> values;
    std::string caption;
    int group = 0;
    for (const auto& ex : d.excitation) {
      const std::size_t start = cats.size();
      double smax = 0.0, smin = std::numeric_limits<double>::infinity();
      for (std::size_t i = 0; i < ex.singular_values.size(); ++i) {
        cats.push_back("\xCF\x83" + std::to_string(i + 1));  // sigma
        values.push_back(ex.singular_values[i]);
        colours.push_back(GroupColour(ex.group));
        if (std::isfinite(ex.singular_values[i])) {
          smax = std::max(smax, ex.singular_values[i]);
          smin = std::min(smin, ex.singular_values[i]);
        }
      }
      if (cats.size() > start) {
        plot.AddSpan(start - 0.5, cats.size() - 0.5, ex.group,
                     group % 2 ? "#ffffff" : "#f1f3f6");
        ++group;
      }
      if (!caption.empty()) caption += "; ";
      caption += ex.group + " " +
                 (smin > 0.0 && std::isfinite(smin) ? Sig(smax / smin) : std::string("unbounded"));
    }
    plot.SetCategories(cats);
    plot.AddBars("", values, {}, Style(kAfter), colours);
    w.Figure(plot.Render(),
             Esc("Largest over smallest singular value (conditioning of each "
                 "group; large values mean a poorly excited direction): " +
                 caption + "."));
  }

  if (!d.coefficients.empty()) {
    w.html << "<h3>Coefficient table</h3>\n<table class=\"coef\">\n<tr><th>Term</th>"
              "<th>Group</th><th class=\"n\">Value</th><th class=\"n\">Std. "
              "error</th><th class=\"n\">|value| / error</th><th>Unit</th></tr>\n";
    for (const auto& g : GroupOrder()) {
      auto it = groups.find(g);
      if (it == groups.end()) continue;
      const char* unit = g == "permanent" ? "nT" : g == "induced" ? "1"
                         : g == "eddy" ? "s" : g == "aux" ? "nT/unit" : "";
      for (const auto* c : it->second) {
        w.html << "<tr><td>" << Esc(c->name) << "</td><td><span class=\"swatch\" "
               << "style=\"background:" << GroupColour(g) << "\"></span>" << g
               << "</td><td class=\"n\">" << Sig(c->value, 4)
               << "</td><td class=\"n\">" << Sig(c->std_error, 2)
               << "</td><td class=\"n\">" << Sig(std::fabs(c->value / c->std_error), 2)
               << "</td><td>" << unit << "</td></tr>\n";
      }
    }
    w.html << "</table>\n";
  }
  w.EndSection();
}

void WriteSpectrum(Writer& w, const ReportData& d, const ReportOptions& opt) {
  if (d.spectrum_before.empty() && d.spectrum_after.empty()) return;
  w.Section("spectrum", "Amplitude spectrum");
  PlotOptions o;
  o.id = "plot-spectrum";
  o.title = "Amplitude spectral density of the total field";
  o.x_label = "frequency (Hz)";
  o.y_label = "amplitude density (nT/\xE2\x88\x9AHz)";
  o.width_px = kFullWidth;
  o.font_size_px = kFullWidthFontPx;
  o.height_px = 320.0;
  o.x_scale = AxisScale::kLog;
  o.y_scale = AxisScale::kLog;
  SvgPlot plot(o);
  std::string caption;
  if (!(d.sample_rate_hz > 0.0) || !std::isfinite(d.sample_rate_hz)) {
    plot.AddNote("sample rate unknown: no spectrum");
  } else {
    SpectrumOptions so = opt.spectrum;
    so.sample_rate_hz = d.sample_rate_hz;
    so.fill_gaps_up_to = opt.spectrum_fill_gaps_up_to;
    if (std::isfinite(d.band_low_hz) && std::isfinite(d.band_high_hz)) {
      plot.AddSpan(d.band_low_hz, d.band_high_hz, "fit band", "#eef3f7");
    }
    const Spectrum before = AmplitudeSpectrum(d.spectrum_before, so);
    const Spectrum after = AmplitudeSpectrum(d.spectrum_after, so);
    auto drop_dc = [](const Spectrum& s, std::vector<double>* f,
                      std::vector<double>* a) {
      for (std::size_t k = 1; k < s.frequency_hz.size(); ++k) {
        f->push_back(s.frequency_hz[k]);
        a->push_back(s.density[k]);
      }
    };
    std::vector<double> fb, ab, fa, aa;
    drop_dc(before, &fb, &ab);
    drop_dc(after, &fa, &aa);
    plot.AddLine("before compensation", fb, ab, Style(kBefore, 1.3));
    plot.AddLine("after compensation", fa, aa, Style(kAfter, 1.3));
    if (!before.usable && !after.usable) plot.AddNote("no usable segment");
    const Spectrum& ref = before.usable ? before : after;
    caption = "Welch average of " + std::to_string(ref.segments_used) +
              " Hann-windowed segment(s) of " + std::to_string(ref.segment_length) +
              " samples (resolution " +
              Sig(d.sample_rate_hz / std::max<std::size_t>(1, ref.segment_length)) +
              " Hz), mean removed per segment.";
    if (!before.message.empty()) caption += " Before: " + before.message + ".";
    if (!after.message.empty()) caption += " After: " + after.message + ".";
  }
  w.Figure(plot.Render(), Esc(caption));
  w.EndSection();
}

void WriteAttitude(Writer& w, const ReportData& d, const TimeAxis& ta,
                   const ReportOptions& opt) {
  const bool has_attitude = !d.time_s.empty() &&
                            (!d.roll_deg.empty() || !d.pitch_deg.empty() ||
                             !d.heading_deg.empty());
  const bool has_track = !d.lat_deg.empty() && !d.lon_deg.empty();
  if (!has_attitude && !has_track) return;
  w.Section("attitude", "Attitude and track");
  w.html << "<div class=\"cols fig-cols\">\n";
  if (has_track) {
    double lat_sum = 0.0;
    std::size_t n = 0;
    for (std::size_t i = 0; i < std::min(d.lat_deg.size(), d.lon_deg.size()); ++i) {
      if (std::isfinite(d.lat_deg[i]) && std::isfinite(d.lon_deg[i])) {
        lat_sum += d.lat_deg[i];
        ++n;
      }
    }
    PlotOptions o;
    o.id = "plot-track";
    o.title = "Track";
    o.x_label = "longitude (\xC2\xB0)";
    o.y_label = "latitude (\xC2\xB0)";
    o.width_px = kHalfWidth;
    o.height_px = 470.0;
    o.x_tick_intervals = 4;
    o.max_points_per_line = opt.max_points_per_line;
    const double lat0 = n ? lat_sum / n : 0.0;
    // Equal aspect on the ground: a degree of longitude is cos(lat) of a
    // degree of latitude (spherical Earth; enough for a plot).
    o.x_unit_in_y_units = std::max(0.01, std::cos(lat0 * 3.14159265358979323846 / 180.0));
    SvgPlot plot(o);
    SeriesStyle st = Style(kTrack, 1.6);
    plot.AddLine("", d.lon_deg, d.lat_deg, st);
    // Start and end markers.
    std::size_t first = d.lat_deg.size(), last = 0;
    for (std::size_t i = 0; i < std::min(d.lat_deg.size(), d.lon_deg.size()); ++i) {
      if (std::isfinite(d.lat_deg[i]) && std::isfinite(d.lon_deg[i])) {
        first = std::min(first, i);
        last = i;
      }
    }
    if (first < d.lat_deg.size()) {
      SeriesStyle start = Style(kReportColourStart);
      start.marker_radius_px = 4.5;
      plot.AddPoints("start", {d.lon_deg[first]}, {d.lat_deg[first]}, {}, start);
      SeriesStyle end = Style(kReportColourEnd);
      end.marker_radius_px = 4.5;
      plot.AddPoints("end", {d.lon_deg[last]}, {d.lat_deg[last]}, {}, end);
    } else {
      plot.AddNote("no valid positions");
    }
    // Extent on the ground, spherical Earth of mean radius 6371 km: enough
    // for a caption.
    double lat_lo = 90, lat_hi = -90, lon_lo = 360, lon_hi = -360;
    for (std::size_t i = 0; i < std::min(d.lat_deg.size(), d.lon_deg.size()); ++i) {
      if (std::isfinite(d.lat_deg[i]) && std::isfinite(d.lon_deg[i])) {
        lat_lo = std::min(lat_lo, d.lat_deg[i]);
        lat_hi = std::max(lat_hi, d.lat_deg[i]);
        lon_lo = std::min(lon_lo, d.lon_deg[i]);
        lon_hi = std::max(lon_hi, d.lon_deg[i]);
      }
    }
    std::string caption = "Equal-aspect plot (longitude scaled by cos latitude).";
    if (lat_lo <= lat_hi) {
      const double km_per_deg = 6371.0 * 3.14159265358979323846 / 180.0;
      caption += " Extent " + Sig((lon_hi - lon_lo) * km_per_deg * o.x_unit_in_y_units, 2) +
                 " km east-west by " + Sig((lat_hi - lat_lo) * km_per_deg, 2) +
                 " km north-south.";
    }
    w.Figure(plot.Render(), Esc(caption));
  }
  if (has_attitude) {
    w.html << "<div class=\"stack\">\n";
    const std::vector<double> t = ta.Map(d.time_s);
    PlotOptions o;
    o.id = "plot-attitude";
    o.title = "Roll and pitch";
    o.x_label = ta.label;
    o.y_label = "angle (\xC2\xB0)";
    o.width_px = kHalfWidth;
    o.height_px = 228.0;
    o.max_points_per_line = opt.max_points_per_line;
    SvgPlot att(o);
    att.AddLine("roll", t, d.roll_deg, Style(kRoll, 1.1));
    att.AddLine("pitch", t, d.pitch_deg, Style(kPitch, 1.1));
    if (d.roll_deg.empty() && d.pitch_deg.empty()) att.AddNote("no roll or pitch channel");
    w.Figure(att.Render(), "");

    PlotOptions h = o;
    h.id = "plot-heading";
    h.title = "Heading";
    h.y_label = "heading (\xC2\xB0 true)";
    h.y_min = 0.0;
    h.y_max = 360.0;
    h.y_tick_step = 90.0;
    SvgPlot hp(h);
    std::vector<double> th, hh;
    WrapBreaks(t, d.heading_deg, &th, &hh);
    hp.AddLine("", th, hh, Style(kHeading, 1.3));
    if (d.heading_deg.empty()) hp.AddNote("no heading channel");
    w.Figure(hp.Render(), "");
    w.html << "</div>\n";
  }
  w.html << "</div>\n";
  w.EndSection();
}

}  // namespace

std::string TermGroupOf(const std::string& name) {
  auto starts = [&](const char* p) { return name.rfind(p, 0) == 0; };
  if (starts("perm_")) return "permanent";
  if (starts("ind_")) return "induced";
  if (starts("eddy_")) return "eddy";
  if (starts("aux_")) return "aux";
  return "other";
}

std::vector<std::string> ReportPlotIds(const ReportData& d) {
  std::vector<std::string> ids;
  for (std::size_t i = 0; i < d.panels.size(); ++i) {
    ids.push_back("plot-field-" + std::to_string(i));
  }
  if (!d.maneuvers.empty()) ids.push_back("plot-maneuvers");
  for (const auto& g : GroupOrder()) {
    for (const auto& c : d.coefficients) {
      if (TermGroupOf(c.name) == g) {
        ids.push_back("plot-coef-" + g);
        break;
      }
    }
  }
  if (!d.excitation.empty()) ids.push_back("plot-excitation");
  if (!d.spectrum_before.empty() || !d.spectrum_after.empty()) {
    ids.push_back("plot-spectrum");
  }
  const bool has_track = !d.lat_deg.empty() && !d.lon_deg.empty();
  if (has_track) ids.push_back("plot-track");
  if (!d.time_s.empty() &&
      (!d.roll_deg.empty() || !d.pitch_deg.empty() || !d.heading_deg.empty())) {
    ids.push_back("plot-attitude");
    ids.push_back("plot-heading");
  }
  return ids;
}

std::string BuildReport(const ReportData& d, const ReportOptions& opt) {
  const std::string title =
      !opt.title.empty()      ? opt.title
      : d.command == "apply" ? "Compensation applied: survey report"
                             : "Compensation fit report";
  const TimeAxis ta = MakeTimeAxis(d);
  Writer w;
  w.html << "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            "<title>"
         << Esc(title + (d.input_file.empty() ? "" : " \xE2\x80\x94 " + d.input_file))
         << "</title>\n<style>" << kCss << "</style>\n</head>\n<body>\n<div class=\"page\">\n";
  w.html << "<header class=\"masthead\"><div class=\"brand\">fluxtrim " << FLUXTRIM_VERSION
         << "</div><h1>" << Esc(title) << "</h1><div class=\"sub\">";
  std::vector<std::string> sub;
  for (const std::string* s : {&d.input_file, &d.platform, &d.recording_date}) {
    if (!s->empty()) sub.push_back(Esc(*s));
  }
  for (std::size_t i = 0; i < sub.size(); ++i) {
    w.html << (i ? " &#183; " : "") << sub[i];
  }
  w.html << "</div></header>\n";

  w.Section("summary", "Summary");
  WriteSummary(w, d);
  w.EndSection();
  WritePanels(w, d, ta, opt);
  WriteManeuvers(w, d);
  WriteCoefficients(w, d);
  WriteSpectrum(w, d, opt);
  WriteAttitude(w, d, ta, opt);

  w.html << "<footer>Report made " << Esc(d.created.empty() ? NowUtc() : d.created)
         << " by fluxtrim " << FLUXTRIM_VERSION
         << ". Interference model: Tolles &amp; Lawson (1950), Leliak (1961). "
            "Self-contained page: no scripts, no external files.</footer>\n";
  w.html << "</div>\n</body>\n</html>\n";
  return w.html.str();
}

void WriteReport(const std::string& path, const ReportData& data,
                 const ReportOptions& options) {
  const std::string html = BuildReport(data, options);
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  if (!out) throw std::runtime_error(path + ": cannot open the report for writing");
  out << html;
  out.flush();
  if (!out) throw std::runtime_error(path + ": writing the report failed");
}

}  // namespace fluxtrim::core
