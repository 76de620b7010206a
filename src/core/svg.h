#pragma once
// A small SVG plot writer for the HTML report: one panel per plot with axes,
// "nice" ticks, lines (decimated for long series), markers with error bars,
// grouped bars on a categorical axis, shaded spans, labels, legend and
// title. Output is one self-contained <svg> element (explicit width, height
// and viewBox; no scripts, no external references) as a string.
//
// Coordinates: data units in, pixels out. The SVG pixel frame has its
// origin at the top left, x to the right, y DOWN; the plot maps the data
// range [x_lo, x_hi] to the plot area's left..right and [y_lo, y_hi] to its
// bottom..top. Log axes map log10 of the value linearly.
//
// Non-finite values never reach the SVG: a NaN or infinite point (or a
// value <= 0 on a log axis) breaks a line into separate pieces and is
// skipped by markers, bars and error bars.

#include <cstddef>
#include <limits>
#include <string>
#include <string_view>
#include <vector>

namespace fluxtrim::core {

// ---------------------------------------------------------------------------
// Ticks.

// Tick positions and labels for one axis. For linear axes the values are
// whole multiples of `step`, a "nice" number 1, 2 or 5 times a power of ten
// (Heckbert 1990, "Nice numbers for graph labels", Graphics Gems I, 61-63).
struct AxisTicks {
  double lo = 0.0;    // axis range drawn (data units, not log10)
  double hi = 1.0;
  double step = 0.0;  // linear step; 0 on log axes
  std::vector<double> values;       // ascending, within [lo, hi]
  std::vector<std::string> labels;  // one per value
};

// Smallest-error nice number near `raw` (> 0): Heckbert's rounding, raw's
// mantissa f in [1, 10) goes to 1 (f < 1.5), 2 (< 3), 5 (< 7) or 10.
double NiceStep(double raw);

// Linear ticks covering [data_min, data_max] with about target_intervals
// intervals. With `loose` the range is widened outward to whole steps
// (Heckbert's "loose labelling"); otherwise the range stays as given and the
// ticks are the multiples of the step inside it. Degenerate input is made
// drawable: min == max (a constant series) widens to +-10 % of the value
// (+-1 for zero); no finite input gives [0, 1]; min > max is swapped.
AxisTicks LinearTicks(double data_min, double data_max,
                      int target_intervals = 5, bool loose = true);

// Ticks at the multiples of a given step (> 0) inside [lo, hi]; the range
// stays as given.
AxisTicks StepTicks(double lo, double hi, double step);

// Log-axis ticks at decades, plus 2 and 5 times each decade when the range
// spans at most three decades (or when fewer than two decades fall inside);
// on very wide ranges only every second, third, ... decade so that at most
// about 8 are labelled. With `loose` the range widens to whole decades;
// otherwise it stays [data_min, data_max]. Requires data_max >= data_min >
// 0; other input gives [1, 10].
AxisTicks LogTicks(double data_min, double data_max, bool loose = true);

// Label for `value` on an axis with tick spacing `step` (> 0): fixed
// notation with just enough decimals for the step, or a x10^n form with
// Unicode superscripts for very large or very small magnitudes, e.g.
// "0.05", "-120", "2.5×10⁻⁶". Values within 1e-9 step of zero print "0".
std::string FormatTickLabel(double value, double step);

// "10⁻⁵" etc. (Unicode superscript digits and minus).
std::string PowerOfTenLabel(int exponent);

// ---------------------------------------------------------------------------
// Text helpers.

// Escapes & < > " ' for XML text and attribute values.
std::string EscapeXml(std::string_view text);

// Number for an SVG attribute: fixed with `decimals` digits, trailing zeros
// trimmed; non-finite input gives "0" (callers skip non-finite points
// before formatting; this is the last guard that no "nan" is written).
std::string SvgNumber(double value, int decimals = 1);

// ---------------------------------------------------------------------------
// Plot.

enum class AxisScale { kLinear, kLog };

struct PlotOptions {
  // Element id (unique on the page, e.g. "plot-spectrum") and classes; the
  // clip path id is derived from it.
  std::string id = "plot";
  std::string css_class = "plot";
  std::string title;    // drawn at the top left
  std::string x_label;  // with unit, e.g. "time since start (s)"
  std::string y_label;
  double width_px = 520.0;
  double height_px = 260.0;
  AxisScale x_scale = AxisScale::kLinear;
  AxisScale y_scale = AxisScale::kLinear;
  // Fixed ranges (data units); NaN = from the data.
  double x_min = std::numeric_limits<double>::quiet_NaN();
  double x_max = std::numeric_limits<double>::quiet_NaN();
  double y_min = std::numeric_limits<double>::quiet_NaN();
  double y_max = std::numeric_limits<double>::quiet_NaN();
  bool x_tight = true;          // x range = data range (else widened to ticks)
  bool y_include_zero = false;  // linear y: range includes 0 (bars always do)
  // Equal aspect: when > 0, one x unit is drawn as long as this many y
  // units (cos(latitude) for a lon/lat track, 1 for x/y in metres); the
  // range of one axis is widened about its centre to honour it.
  double x_unit_in_y_units = 0.0;
  int x_tick_intervals = 6;
  int y_tick_intervals = 5;
  // Fixed linear tick spacing (data units), 0 = nice automatic step; e.g.
  // 90 for a heading axis.
  double x_tick_step = 0.0;
  double y_tick_step = 0.0;
  // Lines longer than this are reduced by min/max decimation (see AddLine).
  std::size_t max_points_per_line = 2400;
  std::string font_family = "'DejaVu Sans', 'Liberation Sans', Arial, sans-serif";
  double font_size_px = 11.0;
  std::string text_colour = "#1f2933";
  std::string axis_colour = "#52606d";
  std::string grid_colour = "#e4e7eb";
  std::string background = "#ffffff";
};

struct SeriesStyle {
  std::string colour = "#22577a";
  double line_width_px = 1.4;
  std::string dash;          // SVG stroke-dasharray, e.g. "4 3"; empty = solid
  double marker_radius_px = 0.0;  // lines: > 0 draws a marker per point
  double opacity = 1.0;
};

class SvgPlot {
 public:
  explicit SvgPlot(PlotOptions options);

  // Categorical x axis: category i is centred at x = i (i = 0..n-1) and
  // labelled under the axis; the x range becomes [-0.5, n - 0.5].
  void SetCategories(std::vector<std::string> labels);

  // A polyline through (x[i], y[i]); x and y have the same length (the
  // shorter length is used otherwise). A non-finite point, or y <= 0 on a
  // log axis, ends one piece and the next finite point starts another.
  // Pieces longer than max_points_per_line are decimated by keeping, in
  // each of max_points_per_line / 2 consecutive-index buckets, the minimum
  // and the maximum in their original order: peaks and the peak-to-peak of
  // every bucket survive, which a plain stride would lose. `name` non-empty
  // adds a legend entry.
  void AddLine(const std::string& name, const std::vector<double>& x,
               const std::vector<double>& y, const SeriesStyle& style);

  // Markers at (x[i], y[i]) with vertical error bars y +- y_error[i]
  // (y_error empty or shorter: no bar for the missing entries). On a
  // categorical axis, x = category index.
  void AddPoints(const std::string& name, const std::vector<double>& x,
                 const std::vector<double>& y,
                 const std::vector<double>& y_error, const SeriesStyle& style);

  // Bars on the categorical axis, values[i] for category i. Every AddBars
  // series is drawn side by side within each category (grouped bars), in
  // the order added. Bars rise from 0 (linear y) or from the bottom of the
  // axis (log y). `colours`, when not empty, colours each bar separately
  // (else style.colour). `errors` (may be empty) adds +- error whiskers.
  void AddBars(const std::string& name, const std::vector<double>& values,
               const std::vector<double>& errors, const SeriesStyle& style,
               const std::vector<std::string>& colours = {});

  // A shaded vertical band from x0 to x1 over the full plot height, drawn
  // behind the data, with an optional label along its top edge.
  void AddSpan(double x0, double x1, const std::string& label,
               const std::string& fill);

  // A horizontal reference line across the plot at y.
  void AddHorizontalLine(double y, const SeriesStyle& style);

  // Text at data point (x, y); anchor "start", "middle" or "end".
  void AddLabel(double x, double y, const std::string& text,
                const std::string& anchor = "start");

  // A note in the plot area (e.g. "no data") drawn centred when the plot
  // has nothing else to show, or at the top left otherwise.
  void AddNote(const std::string& text) { notes_.push_back(text); }

  // The complete <svg> element.
  std::string Render() const;

  // Pixel position of a data value in the rendered layout (for tests and for
  // callers who overlay their own elements). NaN for values that cannot be
  // mapped (non-finite, or <= 0 on a log axis).
  double PixelX(double x) const;
  double PixelY(double y) const;
  // Resolved axes (after auto-ranging and equal aspect).
  AxisTicks XTicks() const { return Resolve().x; }
  AxisTicks YTicks() const { return Resolve().y; }
  // Plot area in pixels: left, top, width, height.
  struct Rect {
    double left, top, width, height;
  };
  Rect PlotArea() const { return Resolve().area; }

 private:
  struct Series {
    enum Kind { kLine, kPoints, kBars } kind;
    std::string name;
    std::vector<double> x, y, err;
    SeriesStyle style;
    std::vector<std::string> colours;
  };
  struct Span {
    double x0, x1;
    std::string label, fill;
  };
  struct Label {
    double x, y;
    std::string text, anchor;
  };
  struct Layout {
    AxisTicks x, y;
    Rect area;
    double legend_y = 0.0;  // baseline of the legend row
    double legend_x = 0.0;  // left edge of the legend row
  };

  Layout Resolve() const;
  double MapX(const Layout& layout, double x) const;
  double MapY(const Layout& layout, double y) const;
  bool XIsLog() const;
  bool UsableX(double x) const;
  bool UsableY(double y) const;
  std::size_t BarSeriesCount() const;
  double TextWidth(const std::string& text, double font_px) const;

  PlotOptions options_;
  std::vector<std::string> categories_;
  std::vector<Series> series_;
  std::vector<Span> spans_;
  std::vector<Label> labels_;
  std::vector<std::pair<double, SeriesStyle>> hlines_;
  std::vector<std::string> notes_;
};

// Decimation used by SvgPlot::AddLine, exposed for tests: indices into a
// finite run of length n to keep so that at most max_points (>= 4) remain;
// the first and last index are always kept. Returns all indices when n <=
// max_points.
std::vector<std::size_t> MinMaxDecimate(const std::vector<double>& y,
                                        std::size_t begin, std::size_t end,
                                        std::size_t max_points);

}  // namespace fluxtrim::core
