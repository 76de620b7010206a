#include "src/core/svg.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>
#include <utility>

namespace fluxtrim::core {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// Pixel coordinates are clamped to this distance outside the viewBox so a
// far-off point (fixed range, clipped) never prints a huge number.
constexpr double kPixelClamp = 1e5;
constexpr int kMaxTicks = 60;
const char* const kMinus = "\xE2\x88\x92";  // U+2212 minus sign

std::string Format(const char* fmt, double v, int digits) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, fmt, digits, v);
  return buffer;
}

std::string ReplaceLeadingMinus(std::string s) {
  if (!s.empty() && s[0] == '-') s = kMinus + s.substr(1);
  return s;
}

std::size_t Utf8Length(const std::string& s) {
  std::size_t n = 0;
  for (unsigned char c : s) n += (c & 0xC0) != 0x80;
  return n;
}

// Finite extents of a set of values, honouring the log-axis rule.
struct Extent {
  double lo = std::numeric_limits<double>::infinity();
  double hi = -std::numeric_limits<double>::infinity();
  void Add(double v) {
    if (!std::isfinite(v)) return;
    lo = std::min(lo, v);
    hi = std::max(hi, v);
  }
  bool Valid() const { return lo <= hi; }
};

}  // namespace

// ---------------------------------------------------------------------------
// Ticks.

double NiceStep(double raw) {
  if (!(raw > 0.0) || !std::isfinite(raw)) return 1.0;
  const double exponent = std::floor(std::log10(raw));
  const double power = std::pow(10.0, exponent);
  const double f = raw / power;
  double nice;
  if (f < 1.5) {
    nice = 1.0;
  } else if (f < 3.0) {
    nice = 2.0;
  } else if (f < 7.0) {
    nice = 5.0;
  } else {
    nice = 10.0;
  }
  return nice * power;
}

std::string PowerOfTenLabel(int exponent) {
  static const char* const kSuperscript[10] = {
      "\xE2\x81\xB0", "\xC2\xB9",     "\xC2\xB2",     "\xC2\xB3",
      "\xE2\x81\xB4", "\xE2\x81\xB5", "\xE2\x81\xB6", "\xE2\x81\xB7",
      "\xE2\x81\xB8", "\xE2\x81\xB9"};
  std::string out = "10";
  if (exponent < 0) out += "\xE2\x81\xBB";  // superscript minus
  const std::string digits = std::to_string(std::abs(exponent));
  for (char d : digits) out += kSuperscript[d - '0'];
  return out;
}

std::string FormatTickLabel(double value, double step) {
  if (!std::isfinite(value)) return "";
  if (!(step > 0.0) || !std::isfinite(step)) step = std::fabs(value);
  if (!(step > 0.0)) return "0";
  if (std::fabs(value) < step * 1e-9) return "0";
  const int step_exponent =
      static_cast<int>(std::floor(std::log10(step) + 1e-9));
  const double magnitude = std::max(std::fabs(value), step);
  const int value_exponent =
      static_cast<int>(std::floor(std::log10(magnitude) + 1e-9));
  if (value_exponent >= 6 || value_exponent <= -4) {
    const int digits = std::clamp(value_exponent - step_exponent, 0, 15);
    const double mantissa = value / std::pow(10.0, value_exponent);
    std::string m = Format("%.*f", mantissa, digits);
    if (m.find('.') != std::string::npos) {  // "1.0" -> "1"
      while (m.back() == '0') m.pop_back();
      if (m.back() == '.') m.pop_back();
    }
    return ReplaceLeadingMinus(m) + "\xC3\x97" + PowerOfTenLabel(value_exponent);
  }
  const int decimals = std::clamp(-step_exponent, 0, 15);
  return ReplaceLeadingMinus(Format("%.*f", value, decimals));
}

AxisTicks LinearTicks(double data_min, double data_max, int target_intervals,
                      bool loose) {
  const bool min_ok = std::isfinite(data_min), max_ok = std::isfinite(data_max);
  if (!min_ok && !max_ok) {
    data_min = 0.0;
    data_max = 1.0;
  } else if (!min_ok) {
    data_min = data_max;
  } else if (!max_ok) {
    data_max = data_min;
  }
  if (data_min > data_max) std::swap(data_min, data_max);
  if (data_min == data_max) {
    const double half = data_min == 0.0 ? 1.0 : 0.1 * std::fabs(data_min);
    data_min -= half;
    data_max += half;
  }
  target_intervals = std::max(target_intervals, 1);
  // Divide before subtracting so +-1e308 does not overflow.
  const double raw = data_max / target_intervals - data_min / target_intervals;
  const double step = NiceStep(raw);
  AxisTicks t;
  t.step = step;
  if (loose) {
    t.lo = std::floor(data_min / step) * step;
    t.hi = std::ceil(data_max / step) * step;
    if (!std::isfinite(t.lo)) t.lo = data_min;
    if (!std::isfinite(t.hi)) t.hi = data_max;
  } else {
    t.lo = data_min;
    t.hi = data_max;
  }
  const double first = std::ceil(t.lo / step - 1e-9);
  const double last = std::floor(t.hi / step + 1e-9);
  for (double i = first; i <= last && t.values.size() < kMaxTicks; i += 1.0) {
    double v = i * step;
    if (std::fabs(v) < step * 1e-9) v = 0.0;
    if (!t.values.empty() && v <= t.values.back()) continue;  // below ulp
    t.values.push_back(v);
    t.labels.push_back(FormatTickLabel(v, step));
  }
  return t;
}

AxisTicks StepTicks(double lo, double hi, double step) {
  if (!(step > 0.0) || !std::isfinite(step) || !std::isfinite(lo) ||
      !std::isfinite(hi) || hi <= lo || (hi - lo) / step > kMaxTicks) {
    return LinearTicks(lo, hi, 5, false);
  }
  AxisTicks t;
  t.lo = lo;
  t.hi = hi;
  t.step = step;
  for (double i = std::ceil(lo / step - 1e-9); i <= std::floor(hi / step + 1e-9);
       i += 1.0) {
    double v = i * step;
    if (std::fabs(v) < step * 1e-9) v = 0.0;
    t.values.push_back(v);
    t.labels.push_back(FormatTickLabel(v, step));
  }
  return t;
}

AxisTicks LogTicks(double data_min, double data_max, bool loose) {
  if (!(data_min > 0.0) || !(data_max >= data_min) || !std::isfinite(data_max)) {
    data_min = 1.0;
    data_max = 10.0;
    loose = true;
  }
  if (data_max == data_min) loose = true;
  const int e_lo = static_cast<int>(std::floor(std::log10(data_min) + 1e-9));
  int e_hi = static_cast<int>(std::ceil(std::log10(data_max) - 1e-9));
  if (e_hi <= e_lo) e_hi = e_lo + 1;
  AxisTicks t;
  t.lo = loose ? std::pow(10.0, e_lo) : data_min;
  t.hi = loose ? std::pow(10.0, e_hi) : data_max;
  t.step = 0.0;
  const double decades = std::log10(t.hi / t.lo);
  const int stride = std::max(1, static_cast<int>(std::ceil(decades / 8.0 - 1e-9)));
  // One style per axis: plain numbers when every decade is in 0.001..10000,
  // else powers of ten throughout (no "0.001" next to "10⁻⁴").
  const bool plain = std::ceil(std::log10(t.lo) - 1e-9) >= -3 &&
                     std::floor(std::log10(t.hi) + 1e-9) <= 4;
  auto label = [plain](double v, int e) {
    if (plain) return FormatTickLabel(v, std::pow(10.0, e));
    const double mantissa = v / std::pow(10.0, e);
    if (std::fabs(mantissa - 1.0) < 1e-9) return PowerOfTenLabel(e);
    return Format("%.*f", mantissa, 0) + "\xC3\x97" + PowerOfTenLabel(e);
  };
  auto inside = [&](double v) {
    return v >= t.lo * (1 - 1e-12) && v <= t.hi * (1 + 1e-12);
  };
  for (int with_minor = decades <= 3.0 ? 1 : 0; with_minor <= 1; ++with_minor) {
    t.values.clear();
    t.labels.clear();
    for (int e = e_lo; e <= e_hi; ++e) {
      const double decade = std::pow(10.0, e);
      if ((e - e_lo) % stride == 0 && inside(decade)) {
        t.values.push_back(decade);
        t.labels.push_back(label(decade, e));
      }
      if (!with_minor) continue;
      for (double m : {2.0, 5.0}) {
        if (inside(m * decade)) {
          t.values.push_back(m * decade);
          t.labels.push_back(label(m * decade, e));
        }
      }
    }
    if (t.values.size() >= 2) break;  // else retry with 2 and 5 as well
  }
  return t;
}

// ---------------------------------------------------------------------------
// Text helpers.

std::string EscapeXml(std::string_view text) {
  std::string out;
  out.reserve(text.size());
  for (char c : text) {
    switch (c) {
      case '&': out += "&amp;"; break;
      case '<': out += "&lt;"; break;
      case '>': out += "&gt;"; break;
      case '"': out += "&quot;"; break;
      case '\'': out += "&#39;"; break;
      default:
        // Control characters other than tab/newline are not allowed in XML
        // 1.0; drop them rather than emit an unparsable document.
        if (static_cast<unsigned char>(c) < 0x20 && c != '\t' && c != '\n' &&
            c != '\r') {
          break;
        }
        out += c;
    }
  }
  return out;
}

std::string SvgNumber(double value, int decimals) {
  if (!std::isfinite(value)) return "0";
  std::string s = Format("%.*f", value, std::clamp(decimals, 0, 12));
  if (s.find('.') != std::string::npos) {
    while (!s.empty() && s.back() == '0') s.pop_back();
    if (!s.empty() && s.back() == '.') s.pop_back();
  }
  if (s == "-0") s = "0";
  return s;
}

std::vector<std::size_t> MinMaxDecimate(const std::vector<double>& y,
                                        std::size_t begin, std::size_t end,
                                        std::size_t max_points) {
  std::vector<std::size_t> keep;
  end = std::min(end, y.size());
  if (begin >= end) return keep;
  const std::size_t n = end - begin;
  max_points = std::max<std::size_t>(max_points, 4);
  if (n <= max_points) {
    for (std::size_t i = begin; i < end; ++i) keep.push_back(i);
    return keep;
  }
  const std::size_t buckets = (max_points - 2) / 2;
  keep.push_back(begin);
  for (std::size_t b = 0; b < buckets; ++b) {
    // Interior indices begin+1 .. end-2 split into `buckets` runs.
    const std::size_t lo = begin + 1 + (n - 2) * b / buckets;
    const std::size_t hi = begin + 1 + (n - 2) * (b + 1) / buckets;
    if (lo >= hi) continue;
    std::size_t imin = lo, imax = lo;
    for (std::size_t i = lo; i < hi; ++i) {
      if (y[i] < y[imin]) imin = i;
      if (y[i] > y[imax]) imax = i;
    }
    const std::size_t a = std::min(imin, imax), c = std::max(imin, imax);
    if (a != keep.back()) keep.push_back(a);
    if (c != keep.back()) keep.push_back(c);
  }
  if (end - 1 != keep.back()) keep.push_back(end - 1);
  return keep;
}

// ---------------------------------------------------------------------------
// Plot.

SvgPlot::SvgPlot(PlotOptions options) : options_(std::move(options)) {}

void SvgPlot::SetCategories(std::vector<std::string> labels) {
  categories_ = std::move(labels);
}

void SvgPlot::AddLine(const std::string& name, const std::vector<double>& x,
                      const std::vector<double>& y, const SeriesStyle& style) {
  Series s{Series::kLine, name, x, y, {}, style, {}};
  const std::size_t n = std::min(x.size(), y.size());
  s.x.resize(n);
  s.y.resize(n);
  series_.push_back(std::move(s));
}

void SvgPlot::AddPoints(const std::string& name, const std::vector<double>& x,
                        const std::vector<double>& y,
                        const std::vector<double>& y_error,
                        const SeriesStyle& style) {
  Series s{Series::kPoints, name, x, y, y_error, style, {}};
  const std::size_t n = std::min(x.size(), y.size());
  s.x.resize(n);
  s.y.resize(n);
  series_.push_back(std::move(s));
}

void SvgPlot::AddBars(const std::string& name, const std::vector<double>& values,
                      const std::vector<double>& errors,
                      const SeriesStyle& style,
                      const std::vector<std::string>& colours) {
  Series s{Series::kBars, name, {}, values, errors, style, colours};
  for (std::size_t i = 0; i < values.size(); ++i) {
    s.x.push_back(static_cast<double>(i));
  }
  series_.push_back(std::move(s));
}

void SvgPlot::AddSpan(double x0, double x1, const std::string& label,
                      const std::string& fill) {
  if (x1 < x0) std::swap(x0, x1);
  spans_.push_back({x0, x1, label, fill});
}

void SvgPlot::AddHorizontalLine(double y, const SeriesStyle& style) {
  hlines_.emplace_back(y, style);
}

void SvgPlot::AddLabel(double x, double y, const std::string& text,
                       const std::string& anchor) {
  labels_.push_back({x, y, text, anchor});
}

bool SvgPlot::XIsLog() const {
  return options_.x_scale == AxisScale::kLog && categories_.empty() &&
         BarSeriesCount() == 0;
}

bool SvgPlot::UsableX(double x) const {
  return std::isfinite(x) && (!XIsLog() || x > 0.0);
}

bool SvgPlot::UsableY(double y) const {
  return std::isfinite(y) && (options_.y_scale != AxisScale::kLog || y > 0.0);
}

std::size_t SvgPlot::BarSeriesCount() const {
  std::size_t n = 0;
  for (const auto& s : series_) n += s.kind == Series::kBars;
  return n;
}

double SvgPlot::TextWidth(const std::string& text, double font_px) const {
  // Average advance of DejaVu/Liberation Sans is about 0.6 em for mixed
  // text; estimates only serve to keep labels apart.
  return 0.6 * font_px * static_cast<double>(Utf8Length(text));
}

SvgPlot::Layout SvgPlot::Resolve() const {
  const PlotOptions& o = options_;
  const double fs = o.font_size_px;
  const bool categorical = !categories_.empty() || BarSeriesCount() > 0;
  std::size_t category_count = categories_.size();
  for (const auto& s : series_) {
    if (s.kind == Series::kBars) {
      category_count = std::max(category_count, s.y.size());
    }
  }

  // Data extents.
  Extent xe, ye;
  for (const auto& s : series_) {
    for (std::size_t i = 0; i < s.x.size(); ++i) {
      if (!UsableX(s.x[i]) || !UsableY(s.y[i])) continue;
      xe.Add(s.x[i]);
      ye.Add(s.y[i]);
      if (i < s.err.size() && std::isfinite(s.err[i])) {
        const double e = std::fabs(s.err[i]);
        if (UsableY(s.y[i] - e)) ye.Add(s.y[i] - e);
        ye.Add(s.y[i] + e);
      }
    }
  }
  for (const auto& sp : spans_) {
    if (UsableX(sp.x0)) xe.Add(sp.x0);
    if (UsableX(sp.x1)) xe.Add(sp.x1);
  }
  for (const auto& l : labels_) {
    if (UsableX(l.x) && UsableY(l.y)) {
      xe.Add(l.x);
      ye.Add(l.y);
    }
  }
  for (const auto& h : hlines_) {
    if (UsableY(h.first)) ye.Add(h.first);
  }
  if (o.y_scale == AxisScale::kLinear &&
      (o.y_include_zero || BarSeriesCount() > 0)) {
    ye.Add(0.0);
  }

  Layout L;
  // X axis.
  if (categorical) {
    L.x.lo = -0.5;
    L.x.hi = static_cast<double>(std::max<std::size_t>(category_count, 1)) - 0.5;
    L.x.step = 1.0;
    for (std::size_t i = 0; i < category_count; ++i) {
      L.x.values.push_back(static_cast<double>(i));
      L.x.labels.push_back(i < categories_.size() ? categories_[i] : "");
    }
  } else {
    double lo = std::isfinite(o.x_min) ? o.x_min : (xe.Valid() ? xe.lo : kNaN);
    double hi = std::isfinite(o.x_max) ? o.x_max : (xe.Valid() ? xe.hi : kNaN);
    const bool fixed = std::isfinite(o.x_min) && std::isfinite(o.x_max);
    if (XIsLog()) {
      L.x = LogTicks(lo, hi, !fixed && !o.x_tight);
    } else {
      L.x = LinearTicks(lo, hi, o.x_tick_intervals, !fixed && !o.x_tight);
      if (o.x_tick_step > 0.0) L.x = StepTicks(L.x.lo, L.x.hi, o.x_tick_step);
    }
  }
  // Y axis.
  const double y_data_lo =
      std::isfinite(o.y_min) ? o.y_min : (ye.Valid() ? ye.lo : kNaN);
  const double y_data_hi =
      std::isfinite(o.y_max) ? o.y_max : (ye.Valid() ? ye.hi : kNaN);
  const bool y_fixed = std::isfinite(o.y_min) && std::isfinite(o.y_max);
  {
    const double lo = y_data_lo, hi = y_data_hi;
    const bool fixed = y_fixed;
    if (o.y_scale == AxisScale::kLog) {
      L.y = LogTicks(lo, hi, !fixed);
    } else {
      L.y = LinearTicks(lo, hi, o.y_tick_intervals, !fixed);
      if (o.y_tick_step > 0.0) L.y = StepTicks(L.y.lo, L.y.hi, o.y_tick_step);
    }
  }

  // Legend entries decide the header height.
  double legend_width = 0.0;
  for (const auto& s : series_) {
    if (!s.name.empty()) legend_width += 22.0 + TextWidth(s.name, fs) + 14.0;
  }
  const double title_width =
      o.title.empty() ? 0.0 : TextWidth(o.title, fs * 1.18) + 16.0;
  double top = 10.0;
  const double first_row = o.title.empty() ? 0.0 : 22.0;
  top += first_row;
  bool legend_own_row = false;
  if (legend_width > 0.0) {
    legend_own_row = title_width + legend_width > o.width_px - 12.0;
    if (legend_own_row || o.title.empty()) top += 18.0;
  }
  top += 6.0;

  // Thinned y ticks, rotated category labels and equal aspect change the
  // margins: a few passes settle them.
  bool y_thinned = false;
  for (int pass = 0; pass < 3; ++pass) {
    double label_width = 0.0;
    for (const auto& s : L.y.labels) label_width = std::max(label_width, TextWidth(s, fs));
    double left = 8.0 + (o.y_label.empty() ? 0.0 : 18.0) + label_width + 8.0;
    double bottom = 6.0 + fs + 6.0 + (o.x_label.empty() ? 0.0 : fs + 8.0);
    double right = 12.0;
    if (!categorical && !L.x.labels.empty()) {
      right = std::max(right, TextWidth(L.x.labels.back(), fs) / 2.0 + 4.0);
    }
    if (categorical && category_count > 0) {
      double widest = 0.0;
      for (const auto& s : L.x.labels) widest = std::max(widest, TextWidth(s, fs));
      const double slot =
          (o.width_px - left - right) / static_cast<double>(category_count);
      if (widest > slot - 4.0) {
        // Labels rotated by 35 degrees about their end: they reach
        // widest*sin(35) below the axis and widest*cos(35) to the left of
        // the first category, which must stay inside the SVG.
        bottom += widest * 0.6;
        const double leftmost = left + slot / 2 - widest * 0.82;
        if (leftmost < 4.0) left += 4.0 - leftmost;
      }
    }
    L.area = {left, top, std::max(20.0, o.width_px - left - right),
              std::max(20.0, o.height_px - top - bottom)};
    // Fewer y ticks when they would crowd (under ~22 px apart).
    if (!y_thinned && o.y_scale == AxisScale::kLinear && !(o.y_tick_step > 0.0) &&
        !(o.x_unit_in_y_units > 0.0) && L.y.values.size() > 2 &&
        L.area.height / static_cast<double>(L.y.values.size() - 1) < 22.0) {
      y_thinned = true;
      const int intervals = std::max(2, static_cast<int>(L.area.height / 30.0));
      L.y = LinearTicks(y_data_lo, y_data_hi, intervals, !y_fixed);
      continue;
    }
    if (!(o.x_unit_in_y_units > 0.0) || categorical || XIsLog() ||
        o.y_scale == AxisScale::kLog) {
      break;
    }
    // One x unit must be drawn as long as x_unit_in_y_units y units.
    const double x_span = L.x.hi - L.x.lo, y_span = L.y.hi - L.y.lo;
    const double px_per_x = L.area.width / x_span;
    const double px_per_y = L.area.height / y_span;
    const double want_px_per_x = px_per_y * o.x_unit_in_y_units;
    double xlo = L.x.lo, xhi = L.x.hi, ylo = L.y.lo, yhi = L.y.hi;
    if (px_per_x > want_px_per_x) {
      const double span = L.area.width / want_px_per_x;
      const double c = 0.5 * (xlo + xhi);
      xlo = c - span / 2;
      xhi = c + span / 2;
    } else {
      const double span = L.area.height / (px_per_x / o.x_unit_in_y_units);
      const double c = 0.5 * (ylo + yhi);
      ylo = c - span / 2;
      yhi = c + span / 2;
    }
    L.x = LinearTicks(xlo, xhi, o.x_tick_intervals, false);
    L.y = LinearTicks(ylo, yhi, o.y_tick_intervals, false);
  }

  L.legend_x = legend_own_row || o.title.empty()
                   ? L.area.left
                   : o.width_px - 8.0 - legend_width;
  L.legend_y = legend_own_row || o.title.empty() ? 10.0 + first_row + 12.0
                                                  : 10.0 + 14.0;
  return L;
}

double SvgPlot::MapX(const Layout& L, double x) const {
  if (!UsableX(x)) return kNaN;
  double v = x, lo = L.x.lo, hi = L.x.hi;
  if (XIsLog()) {
    v = std::log10(x);
    lo = std::log10(lo);
    hi = std::log10(hi);
  }
  const double px = L.area.left + (v - lo) / (hi - lo) * L.area.width;
  return std::clamp(px, -kPixelClamp, kPixelClamp);
}

double SvgPlot::MapY(const Layout& L, double y) const {
  if (!UsableY(y)) return kNaN;
  double v = y, lo = L.y.lo, hi = L.y.hi;
  if (options_.y_scale == AxisScale::kLog) {
    v = std::log10(y);
    lo = std::log10(lo);
    hi = std::log10(hi);
  }
  const double py = L.area.top + L.area.height - (v - lo) / (hi - lo) * L.area.height;
  return std::clamp(py, -kPixelClamp, kPixelClamp);
}

double SvgPlot::PixelX(double x) const { return MapX(Resolve(), x); }
double SvgPlot::PixelY(double y) const { return MapY(Resolve(), y); }

std::string SvgPlot::Render() const {
  const PlotOptions& o = options_;
  const Layout L = Resolve();
  const double fs = o.font_size_px;
  const bool categorical = !categories_.empty() || BarSeriesCount() > 0;
  const Rect& a = L.area;
  const std::string clip_id = o.id + "-clip";
  auto N = [](double v) { return SvgNumber(v, 1); };
  std::ostringstream s;

  s << "<svg xmlns=\"http://www.w3.org/2000/svg\" id=\"" << EscapeXml(o.id)
    << "\" class=\"" << EscapeXml(o.css_class) << "\" width=\""
    << N(o.width_px) << "\" height=\"" << N(o.height_px)
    << "\" viewBox=\"0 0 " << N(o.width_px) << ' ' << N(o.height_px)
    << "\" role=\"img\" font-family=\"" << EscapeXml(o.font_family)
    << "\" font-size=\"" << N(fs) << "\">\n";
  s << "<title>" << EscapeXml(o.title.empty() ? o.id : o.title) << "</title>\n";
  s << "<defs><clipPath id=\"" << EscapeXml(clip_id) << "\"><rect x=\""
    << N(a.left) << "\" y=\"" << N(a.top) << "\" width=\"" << N(a.width)
    << "\" height=\"" << N(a.height) << "\"/></clipPath></defs>\n";
  s << "<rect width=\"100%\" height=\"100%\" fill=\"" << EscapeXml(o.background)
    << "\"/>\n";
  if (!o.title.empty()) {
    s << "<text x=\"8\" y=\"" << N(10.0 + 14.0) << "\" font-size=\""
      << N(fs * 1.18) << "\" font-weight=\"600\" fill=\""
      << EscapeXml(o.text_colour) << "\">" << EscapeXml(o.title) << "</text>\n";
  }

  // Spans behind everything else.
  s << "<g class=\"spans\">\n";
  for (const auto& sp : spans_) {
    double x0 = MapX(L, sp.x0), x1 = MapX(L, sp.x1);
    if (!std::isfinite(x0) || !std::isfinite(x1)) continue;
    x0 = std::clamp(x0, a.left, a.left + a.width);
    x1 = std::clamp(x1, a.left, a.left + a.width);
    if (x1 - x0 <= 0.0) continue;
    s << "<rect x=\"" << N(x0) << "\" y=\"" << N(a.top) << "\" width=\""
      << N(x1 - x0) << "\" height=\"" << N(a.height) << "\" fill=\""
      << EscapeXml(sp.fill) << "\"/>\n";
  }
  s << "</g>\n";

  // Grid and ticks.
  s << "<g class=\"grid\" stroke=\"" << EscapeXml(o.grid_colour)
    << "\" stroke-width=\"1\">\n";
  for (double v : L.y.values) {
    const double y = MapY(L, v);
    if (!std::isfinite(y)) continue;
    s << "<line x1=\"" << N(a.left) << "\" x2=\"" << N(a.left + a.width)
      << "\" y1=\"" << N(y) << "\" y2=\"" << N(y) << "\"/>\n";
  }
  if (!categorical) {
    for (double v : L.x.values) {
      const double x = MapX(L, v);
      if (!std::isfinite(x)) continue;
      s << "<line x1=\"" << N(x) << "\" x2=\"" << N(x) << "\" y1=\""
        << N(a.top) << "\" y2=\"" << N(a.top + a.height) << "\"/>\n";
    }
  }
  s << "</g>\n";

  // Span labels sit over the grid but under the data.
  for (const auto& sp : spans_) {
    if (sp.label.empty()) continue;
    double x0 = MapX(L, sp.x0), x1 = MapX(L, sp.x1);
    if (!std::isfinite(x0) || !std::isfinite(x1)) continue;
    x0 = std::clamp(x0, a.left, a.left + a.width);
    x1 = std::clamp(x1, a.left, a.left + a.width);
    if (TextWidth(sp.label, fs * 0.9) > x1 - x0 + 6.0) continue;  // no room
    s << "<text x=\"" << N(0.5 * (x0 + x1)) << "\" y=\"" << N(a.top + fs)
      << "\" text-anchor=\"middle\" font-size=\"" << N(fs * 0.9)
      << "\" fill=\"" << EscapeXml(o.axis_colour) << "\">"
      << EscapeXml(sp.label) << "</text>\n";
  }

  // Data.
  s << "<g clip-path=\"url(#" << EscapeXml(clip_id) << ")\">\n";
  const std::size_t bar_series = BarSeriesCount();
  const double group_width = 0.8;
  std::size_t bar_index = 0;
  const double y_base = o.y_scale == AxisScale::kLog
                            ? a.top + a.height
                            : std::clamp(MapY(L, 0.0), a.top, a.top + a.height);
  for (const auto& se : series_) {
    const SeriesStyle& st = se.style;
    const std::string colour = EscapeXml(st.colour);
    const std::string opacity =
        st.opacity < 1.0 ? " opacity=\"" + SvgNumber(st.opacity, 2) + "\"" : "";
    if (se.kind == Series::kLine) {
      // Split into finite pieces, decimate each within its share of the
      // budget.
      std::vector<std::pair<std::size_t, std::size_t>> pieces;
      std::size_t finite_total = 0;
      for (std::size_t i = 0; i < se.x.size();) {
        while (i < se.x.size() && !(UsableX(se.x[i]) && UsableY(se.y[i]))) ++i;
        const std::size_t b = i;
        while (i < se.x.size() && UsableX(se.x[i]) && UsableY(se.y[i])) ++i;
        if (i > b) {
          pieces.emplace_back(b, i);
          finite_total += i - b;
        }
      }
      for (const auto& [b, e] : pieces) {
        const std::size_t share = std::max<std::size_t>(
            4, static_cast<std::size_t>(static_cast<double>(o.max_points_per_line) *
                                        static_cast<double>(e - b) /
                                        static_cast<double>(finite_total)));
        const std::vector<std::size_t> keep = MinMaxDecimate(se.y, b, e, share);
        if (keep.size() == 1) {
          s << "<circle cx=\"" << N(MapX(L, se.x[keep[0]])) << "\" cy=\""
            << N(MapY(L, se.y[keep[0]])) << "\" r=\""
            << N(std::max(1.5, st.line_width_px)) << "\" fill=\"" << colour
            << "\"" << opacity << "/>\n";
          continue;
        }
        s << "<polyline fill=\"none\" stroke=\"" << colour
          << "\" stroke-width=\"" << SvgNumber(st.line_width_px, 2)
          << "\" stroke-linejoin=\"round\" stroke-linecap=\"round\"";
        if (!st.dash.empty()) s << " stroke-dasharray=\"" << EscapeXml(st.dash) << "\"";
        s << opacity << " points=\"";
        for (std::size_t k = 0; k < keep.size(); ++k) {
          if (k) s << ' ';
          s << N(MapX(L, se.x[keep[k]])) << ',' << N(MapY(L, se.y[keep[k]]));
        }
        s << "\"/>\n";
        if (st.marker_radius_px > 0.0) {
          for (std::size_t k : keep) {
            s << "<circle cx=\"" << N(MapX(L, se.x[k])) << "\" cy=\""
              << N(MapY(L, se.y[k])) << "\" r=\"" << N(st.marker_radius_px)
              << "\" fill=\"" << colour << "\"/>\n";
          }
        }
      }
    } else if (se.kind == Series::kPoints || se.kind == Series::kBars) {
      double offset = 0.0, bar_w = 0.0;
      if (se.kind == Series::kBars) {
        bar_w = group_width / static_cast<double>(bar_series);
        offset = -group_width / 2 + bar_w * (static_cast<double>(bar_index) + 0.5);
        ++bar_index;
      }
      const double px_per_unit = a.width / (L.x.hi - L.x.lo);
      for (std::size_t i = 0; i < se.x.size(); ++i) {
        const double xc = MapX(L, se.x[i] + offset);
        const double yv = MapY(L, se.y[i]);
        if (!std::isfinite(xc) || !std::isfinite(yv)) continue;
        const std::string fill =
            i < se.colours.size() ? EscapeXml(se.colours[i]) : colour;
        if (se.kind == Series::kBars) {
          const double w = std::max(1.0, bar_w * px_per_unit - 2.0);
          const double y0 = std::min(yv, y_base), h = std::fabs(y_base - yv);
          s << "<rect x=\"" << N(xc - w / 2) << "\" y=\"" << N(y0)
            << "\" width=\"" << N(w) << "\" height=\"" << N(std::max(h, 0.5))
            << "\" fill=\"" << fill << "\"" << opacity << "/>\n";
        }
        if (i < se.err.size() && std::isfinite(se.err[i]) && se.err[i] != 0.0) {
          const double e = std::fabs(se.err[i]);
          double y_top = MapY(L, se.y[i] + e);
          double y_bot = MapY(L, se.y[i] - e);
          if (!std::isfinite(y_bot)) y_bot = a.top + a.height;  // log axis
          if (std::isfinite(y_top)) {
            const double cap = std::min(5.0, bar_w > 0 ? bar_w * px_per_unit / 4 : 5.0);
            const std::string ec =
                se.kind == Series::kBars ? EscapeXml(o.text_colour) : fill;
            s << "<path fill=\"none\" stroke=\"" << ec
              << "\" stroke-width=\"1.2\" d=\"M" << N(xc) << ',' << N(y_top)
              << "V" << N(y_bot) << "M" << N(xc - cap) << ',' << N(y_top)
              << "h" << N(2 * cap) << "M" << N(xc - cap) << ',' << N(y_bot)
              << "h" << N(2 * cap) << "\"/>\n";
          }
        }
        if (se.kind == Series::kPoints) {
          const double r = st.marker_radius_px > 0 ? st.marker_radius_px : 3.5;
          s << "<circle cx=\"" << N(xc) << "\" cy=\"" << N(yv) << "\" r=\""
            << N(r) << "\" fill=\"" << fill << "\"" << opacity << "/>\n";
        }
      }
    }
  }
  for (const auto& [yv, st] : hlines_) {
    const double y = MapY(L, yv);
    if (!std::isfinite(y)) continue;
    s << "<line x1=\"" << N(a.left) << "\" x2=\"" << N(a.left + a.width)
      << "\" y1=\"" << N(y) << "\" y2=\"" << N(y) << "\" stroke=\""
      << EscapeXml(st.colour) << "\" stroke-width=\""
      << SvgNumber(st.line_width_px, 2) << "\"";
    if (!st.dash.empty()) s << " stroke-dasharray=\"" << EscapeXml(st.dash) << "\"";
    s << "/>\n";
  }
  for (const auto& l : labels_) {
    const double x = MapX(L, l.x), y = MapY(L, l.y);
    if (!std::isfinite(x) || !std::isfinite(y)) continue;
    const std::string anchor =
        (l.anchor == "middle" || l.anchor == "end") ? l.anchor : "start";
    const double dx = anchor == "start" ? 5.0 : anchor == "end" ? -5.0 : 0.0;
    s << "<text x=\"" << N(x + dx) << "\" y=\"" << N(y - 5.0)
      << "\" text-anchor=\"" << anchor << "\" fill=\""
      << EscapeXml(o.text_colour) << "\" stroke=\"#ffffff\" stroke-width=\"3\" "
         "paint-order=\"stroke\">"
      << EscapeXml(l.text) << "</text>\n";
  }
  s << "</g>\n";

  // Axes frame (left and bottom) and tick labels.
  s << "<g class=\"axes\" stroke=\"" << EscapeXml(o.axis_colour)
    << "\" stroke-width=\"1\" fill=\"none\"><path d=\"M" << N(a.left) << ','
    << N(a.top) << "V" << N(a.top + a.height) << "H" << N(a.left + a.width)
    << "\"/>";
  for (double v : L.y.values) {
    const double y = MapY(L, v);
    if (!std::isfinite(y)) continue;
    s << "<path d=\"M" << N(a.left - 4) << ',' << N(y) << "h4\"/>";
  }
  for (double v : L.x.values) {
    const double x = MapX(L, v);
    if (!std::isfinite(x)) continue;
    s << "<path d=\"M" << N(x) << ',' << N(a.top + a.height) << "v4\"/>";
  }
  s << "</g>\n";

  s << "<g class=\"tick-labels\" fill=\"" << EscapeXml(o.axis_colour) << "\">\n";
  for (std::size_t i = 0; i < L.y.values.size(); ++i) {
    const double y = MapY(L, L.y.values[i]);
    if (!std::isfinite(y)) continue;
    s << "<text x=\"" << N(a.left - 7) << "\" y=\"" << N(y + fs * 0.35)
      << "\" text-anchor=\"end\">" << EscapeXml(L.y.labels[i]) << "</text>\n";
  }
  {
    double widest = 0.0;
    for (const auto& t : L.x.labels) widest = std::max(widest, TextWidth(t, fs));
    const double slot = categorical && !L.x.values.empty()
                            ? a.width / static_cast<double>(L.x.values.size())
                            : 1e9;
    const bool rotate = categorical && widest > slot - 4.0;
    // Skip labels on a dense linear axis rather than overlap them.
    double last_right = -1e9;
    for (std::size_t i = 0; i < L.x.values.size(); ++i) {
      const double x = MapX(L, L.x.values[i]);
      if (!std::isfinite(x)) continue;
      const double y = a.top + a.height + 6.0 + fs;
      if (rotate) {
        s << "<text x=\"" << N(x) << "\" y=\"" << N(y) << "\" text-anchor=\"end\" "
          << "transform=\"rotate(-35 " << N(x) << ' ' << N(y) << ")\">"
          << EscapeXml(L.x.labels[i]) << "</text>\n";
        continue;
      }
      const double w = TextWidth(L.x.labels[i], fs);
      if (x - w / 2 < last_right + 4.0) continue;
      last_right = x + w / 2;
      s << "<text x=\"" << N(x) << "\" y=\"" << N(y)
        << "\" text-anchor=\"middle\">" << EscapeXml(L.x.labels[i])
        << "</text>\n";
    }
  }
  s << "</g>\n";

  if (!o.x_label.empty()) {
    s << "<text x=\"" << N(a.left + a.width / 2) << "\" y=\""
      << N(o.height_px - 6.0) << "\" text-anchor=\"middle\" fill=\""
      << EscapeXml(o.text_colour) << "\">" << EscapeXml(o.x_label) << "</text>\n";
  }
  if (!o.y_label.empty()) {
    const double x = 8.0 + fs * 0.9, y = a.top + a.height / 2;
    // A label longer than the axis would run into the title: shrink it.
    const double label_fs = std::clamp(
        fs * (a.height + 16.0) / std::max(1.0, TextWidth(o.y_label, fs)), 8.0, fs);
    s << "<text x=\"" << N(x) << "\" y=\"" << N(y)
      << "\" text-anchor=\"middle\" transform=\"rotate(-90 " << N(x) << ' '
      << N(y) << ")\" fill=\"" << EscapeXml(o.text_colour) << "\"";
    if (label_fs < fs) s << " font-size=\"" << SvgNumber(label_fs, 1) << "\"";
    s << ">"
      << EscapeXml(o.y_label) << "</text>\n";
  }

  // Notes.
  bool has_data = false;
  for (const auto& se : series_) {
    for (std::size_t i = 0; i < se.x.size() && !has_data; ++i) {
      has_data = UsableX(se.x[i]) && UsableY(se.y[i]);
    }
  }
  for (std::size_t i = 0; i < notes_.size(); ++i) {
    if (has_data) {
      s << "<text x=\"" << N(a.left + 6) << "\" y=\""
        << N(a.top + fs + 4 + i * (fs + 3)) << "\" fill=\""
        << EscapeXml(o.axis_colour) << "\" font-style=\"italic\">"
        << EscapeXml(notes_[i]) << "</text>\n";
    } else {
      s << "<text x=\"" << N(a.left + a.width / 2) << "\" y=\""
        << N(a.top + a.height / 2 + i * (fs + 4)) << "\" text-anchor=\"middle\" fill=\""
        << EscapeXml(o.axis_colour) << "\" font-style=\"italic\">"
        << EscapeXml(notes_[i]) << "</text>\n";
    }
  }

  // Legend.
  double lx = L.legend_x;
  const double ly = L.legend_y;
  for (const auto& se : series_) {
    if (se.name.empty()) continue;
    const std::string colour = EscapeXml(se.style.colour);
    if (se.kind == Series::kLine) {
      s << "<line x1=\"" << N(lx) << "\" x2=\"" << N(lx + 16) << "\" y1=\""
        << N(ly - fs * 0.35) << "\" y2=\"" << N(ly - fs * 0.35)
        << "\" stroke=\"" << colour << "\" stroke-width=\""
        << SvgNumber(std::max(2.0, se.style.line_width_px), 2) << "\"";
      if (!se.style.dash.empty()) s << " stroke-dasharray=\"" << EscapeXml(se.style.dash) << "\"";
      s << "/>";
    } else if (se.kind == Series::kBars) {
      s << "<rect x=\"" << N(lx + 3) << "\" y=\"" << N(ly - fs * 0.85)
        << "\" width=\"10\" height=\"10\" fill=\"" << colour << "\"/>";
    } else {
      s << "<circle cx=\"" << N(lx + 8) << "\" cy=\"" << N(ly - fs * 0.35)
        << "\" r=\"3.5\" fill=\"" << colour << "\"/>";
    }
    s << "<text x=\"" << N(lx + 22) << "\" y=\"" << N(ly) << "\" fill=\""
      << EscapeXml(o.text_colour) << "\">" << EscapeXml(se.name) << "</text>\n";
    lx += 22.0 + TextWidth(se.name, fs) + 14.0;
  }
  s << "</svg>\n";
  return s.str();
}

}  // namespace fluxtrim::core
