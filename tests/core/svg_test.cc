// SVG plot writer: nice ticks, coordinate mapping, escaping, NaN handling,
// decimation, and well-formed output checked by Python's xml.etree
// (FLUXTRIM_PYTHON) as an outside XML parser.

#include "src/core/svg.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include "tests/core/markup_scan.h"

namespace fluxtrim::core {
namespace {

namespace fs = std::filesystem;
using report_testing::Attr;
using report_testing::HasNonFiniteWord;
using report_testing::TagsOf;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();
// Coordinates are written with one decimal: a parsed coordinate is within
// 0.05 px of the exact mapping (plus float noise).
constexpr double kPixelTol = 0.051;
const std::string kMinus = "\xE2\x88\x92";

std::size_t Count(const std::string& s, const std::string& needle) {
  std::size_t n = 0;
  for (std::size_t p = s.find(needle); p != std::string::npos;
       p = s.find(needle, p + needle.size())) {
    ++n;
  }
  return n;
}

// The mantissa of a 1-2-5 step is 1, 2 or 5.
bool IsOneTwoFive(double step) {
  const double e = std::floor(std::log10(step) + 1e-12);
  const double m = step / std::pow(10.0, e);
  for (double nice : {1.0, 2.0, 5.0, 10.0}) {
    if (std::fabs(m - nice) < 1e-9 * nice) return true;
  }
  return false;
}

// All points="x,y ..." lists of the polylines in `svg`.
std::vector<std::vector<std::pair<double, double>>> Polylines(const std::string& svg) {
  std::vector<std::vector<std::pair<double, double>>> out;
  for (const std::string& tag : TagsOf(svg, "polyline")) {
    std::vector<std::pair<double, double>> pts;
    std::istringstream in(Attr(tag, "points"));
    std::string pair;
    while (in >> pair) {
      const std::size_t comma = pair.find(',');
      pts.emplace_back(std::stod(pair.substr(0, comma)), std::stod(pair.substr(comma + 1)));
    }
    out.push_back(pts);
  }
  return out;
}

TEST(SvgTicksTest, NiceStepRoundsToOneTwoFive) {
  // Thresholds 1.5, 3 and 7 on the mantissa (Heckbert 1990, "Nice numbers
  // for graph labels", Graphics Gems I; thresholds from memory).
  EXPECT_DOUBLE_EQ(NiceStep(0.13), 0.1);
  EXPECT_DOUBLE_EQ(NiceStep(0.16), 0.2);
  EXPECT_DOUBLE_EQ(NiceStep(2.9), 2.0);
  EXPECT_DOUBLE_EQ(NiceStep(3.1), 5.0);
  EXPECT_DOUBLE_EQ(NiceStep(6.9), 5.0);
  EXPECT_DOUBLE_EQ(NiceStep(7.4), 10.0);
  EXPECT_NEAR(NiceStep(3.3e-7), 5e-7, 1e-22);
  EXPECT_NEAR(NiceStep(1.2e12), 1e12, 1.0);
}

TEST(SvgTicksTest, LinearTicksAreNiceAndCoverTheRange) {
  struct Case {
    double lo, hi;
  };
  // Positive, negative, straddling zero, tiny, huge, offset-dominated
  // (a 2 nT window at 50000 nT), and ranges near the double limit.
  for (const Case c : {Case{0, 37}, Case{-12.5, 3.2}, Case{-880, -120},
                       Case{1e-9, 7e-9}, Case{-3e-12, 4e-12}, Case{1e12, 5.5e12},
                       Case{49999.2, 50001.1}, Case{-1e300, 1e300},
                       Case{0.001, 0.0013}}) {
    const AxisTicks t = LinearTicks(c.lo, c.hi, 5, /*loose=*/true);
    SCOPED_TRACE(testing::Message() << "[" << c.lo << ", " << c.hi << "]");
    EXPECT_TRUE(IsOneTwoFive(t.step)) << t.step;
    EXPECT_LE(t.lo, c.lo);
    EXPECT_GE(t.hi, c.hi);
    ASSERT_GE(t.values.size(), 3u);
    EXPECT_LE(t.values.size(), 12u);
    ASSERT_EQ(t.values.size(), t.labels.size());
    for (std::size_t i = 0; i < t.values.size(); ++i) {
      // Each tick is a whole multiple of the step.
      const double q = t.values[i] / t.step;
      EXPECT_NEAR(q, std::round(q), 1e-6) << t.values[i];
      EXPECT_FALSE(t.labels[i].empty());
      EXPECT_EQ(t.labels[i].find("nan"), std::string::npos);
      EXPECT_EQ(t.labels[i].find("inf"), std::string::npos);
      if (i > 0) {
        EXPECT_GT(t.values[i], t.values[i - 1]);
        EXPECT_NE(t.labels[i], t.labels[i - 1]) << "labels must differ";
      }
    }
  }
}

TEST(SvgTicksTest, HandDerivedTicks) {
  // [0, 37], 5 intervals: raw step 7.4 -> 10 (Heckbert rule), loose range
  // [0, 40].
  AxisTicks t = LinearTicks(0, 37, 5, true);
  EXPECT_DOUBLE_EQ(t.step, 10.0);
  EXPECT_DOUBLE_EQ(t.lo, 0.0);
  EXPECT_DOUBLE_EQ(t.hi, 40.0);
  EXPECT_EQ(t.labels, (std::vector<std::string>{"0", "10", "20", "30", "40"}));
  // [-12.5, 3.2]: raw 3.14 -> 5; range [-15, 5].
  t = LinearTicks(-12.5, 3.2, 5, true);
  EXPECT_DOUBLE_EQ(t.step, 5.0);
  EXPECT_EQ(t.labels, (std::vector<std::string>{kMinus + "15", kMinus + "10",
                                                kMinus + "5", "0", "5"}));
  // Tight: range kept, ticks inside only.
  t = LinearTicks(0.3, 9.7, 5, false);
  EXPECT_DOUBLE_EQ(t.lo, 0.3);
  EXPECT_DOUBLE_EQ(t.hi, 9.7);
  EXPECT_EQ(t.labels, (std::vector<std::string>{"2", "4", "6", "8"}));
  // 0.1 + 0.2 style rounding never shows: step 0.1 over [0, 0.35].
  t = LinearTicks(0.0, 0.35, 4, true);
  EXPECT_EQ(t.labels, (std::vector<std::string>{"0", "0.1", "0.2", "0.3", "0.4"}));
}

TEST(SvgTicksTest, ConstantAndEmptySeriesGetADrawableRange) {
  AxisTicks t = LinearTicks(5.0, 5.0);
  EXPECT_LT(t.lo, 5.0);
  EXPECT_GT(t.hi, 5.0);
  EXPECT_GE(t.values.size(), 3u);
  t = LinearTicks(0.0, 0.0);
  EXPECT_LE(t.lo, -1.0);
  EXPECT_GE(t.hi, 1.0);
  t = LinearTicks(-2.5e-13, -2.5e-13);
  EXPECT_LT(t.lo, -2.5e-13);
  EXPECT_GT(t.hi, -2.5e-13);
  EXPECT_TRUE(IsOneTwoFive(t.step));
  t = LinearTicks(kNaN, kNaN);
  EXPECT_DOUBLE_EQ(t.lo, 0.0);
  EXPECT_DOUBLE_EQ(t.hi, 1.0);
  t = LinearTicks(kInf, -kInf);
  EXPECT_TRUE(std::isfinite(t.lo) && std::isfinite(t.hi));
  t = LinearTicks(10.0, 2.0);  // reversed
  EXPECT_LE(t.lo, 2.0);
  EXPECT_GE(t.hi, 10.0);
}

TEST(SvgTicksTest, LabelsAreShortAndExact) {
  EXPECT_EQ(FormatTickLabel(0.30000000000000004, 0.1), "0.3");
  EXPECT_EQ(FormatTickLabel(-5.0, 1.0), kMinus + "5");
  EXPECT_EQ(FormatTickLabel(1e-17, 0.1), "0");
  EXPECT_EQ(FormatTickLabel(0.05, 0.01), "0.05");
  EXPECT_EQ(FormatTickLabel(52000.0, 500.0), "52000");
  // Very small and very large magnitudes use x10^n with superscripts.
  EXPECT_EQ(FormatTickLabel(2.5e-6, 5e-7), "2.5\xC3\x97" "10\xE2\x81\xBB\xE2\x81\xB6");
  EXPECT_EQ(FormatTickLabel(1.5e6, 5e5), "1.5\xC3\x97" "10\xE2\x81\xB6");
  EXPECT_EQ(PowerOfTenLabel(-12), "10\xE2\x81\xBB\xC2\xB9\xC2\xB2");
}

TEST(SvgTicksTest, LogTicksAreDecadesAndOneTwoFive) {
  AxisTicks t = LogTicks(0.03, 450.0);  // loose: whole decades
  EXPECT_DOUBLE_EQ(t.lo, 0.01);
  EXPECT_DOUBLE_EQ(t.hi, 1000.0);
  EXPECT_EQ(t.labels, (std::vector<std::string>{"0.01", "0.1", "1", "10", "100", "1000"}));
  t = LogTicks(2.0, 30.0);  // two decades: 1, 2, 5 per decade
  EXPECT_EQ(t.labels, (std::vector<std::string>{"1", "2", "5", "10", "20", "50", "100"}));
  t = LogTicks(0.0098, 5.0, /*loose=*/false);
  EXPECT_DOUBLE_EQ(t.lo, 0.0098);
  EXPECT_DOUBLE_EQ(t.hi, 5.0);
  EXPECT_DOUBLE_EQ(t.values.front(), 0.01);
  EXPECT_EQ(t.labels.back(), "5");
  t = LogTicks(1e-12, 1e12);  // 24 decades: at most ~8 labelled
  EXPECT_LE(t.values.size(), 9u);
  EXPECT_EQ(t.labels.front(), "10\xE2\x81\xBB\xC2\xB9\xC2\xB2");
  // One label style per axis: an axis reaching 1e-4 uses powers of ten
  // throughout, not "0.001" next to "10⁻⁴".
  t = LogTicks(2e-4, 30.0);  // loose: 1e-4 .. 1e2, seven decades
  ASSERT_EQ(t.labels.size(), 7u);
  EXPECT_EQ(t.labels[1], "10\xE2\x81\xBB\xC2\xB3");  // 10^-3
  EXPECT_EQ(t.labels[5], "10\xC2\xB9");                // 10^1
  t = LogTicks(-1.0, 5.0);  // invalid for a log axis
  EXPECT_DOUBLE_EQ(t.lo, 1.0);
  EXPECT_DOUBLE_EQ(t.hi, 10.0);
}

TEST(SvgPlotTest, DataMapsToThePlotArea) {
  PlotOptions o;
  o.x_min = 0.0;
  o.x_max = 10.0;
  o.y_min = -5.0;
  o.y_max = 5.0;
  SvgPlot plot(o);
  plot.AddLine("", {0, 10}, {-5, 5}, SeriesStyle());
  const SvgPlot::Rect a = plot.PlotArea();
  EXPECT_DOUBLE_EQ(plot.PixelX(0.0), a.left);
  EXPECT_DOUBLE_EQ(plot.PixelX(10.0), a.left + a.width);
  EXPECT_DOUBLE_EQ(plot.PixelX(2.5), a.left + 0.25 * a.width);
  EXPECT_DOUBLE_EQ(plot.PixelY(-5.0), a.top + a.height);  // y grows downward
  EXPECT_DOUBLE_EQ(plot.PixelY(5.0), a.top);
  EXPECT_DOUBLE_EQ(plot.PixelY(0.0), a.top + 0.5 * a.height);
  EXPECT_TRUE(std::isnan(plot.PixelX(kNaN)));
  // The plot area lies inside the SVG.
  EXPECT_GT(a.left, 0.0);
  EXPECT_GT(a.top, 0.0);
  EXPECT_LT(a.left + a.width, o.width_px);
  EXPECT_LT(a.top + a.height, o.height_px);
  // The polyline holds exactly the mapped end points.
  const auto lines = Polylines(plot.Render());
  ASSERT_EQ(lines.size(), 1u);
  ASSERT_EQ(lines[0].size(), 2u);
  EXPECT_NEAR(lines[0][0].first, a.left, kPixelTol);
  EXPECT_NEAR(lines[0][0].second, a.top + a.height, kPixelTol);
  EXPECT_NEAR(lines[0][1].first, a.left + a.width, kPixelTol);
  EXPECT_NEAR(lines[0][1].second, a.top, kPixelTol);
}

TEST(SvgPlotTest, LogAxesMapDecadesEvenly) {
  PlotOptions o;
  o.x_scale = AxisScale::kLog;
  o.y_scale = AxisScale::kLog;
  SvgPlot plot(o);
  plot.AddLine("", {1, 10, 100}, {0.01, 1, 100}, SeriesStyle());
  const SvgPlot::Rect a = plot.PlotArea();
  EXPECT_NEAR(plot.PixelX(10.0), a.left + a.width / 2, 1e-9);
  EXPECT_NEAR(plot.PixelY(1.0), a.top + a.height / 2, 1e-9);
  EXPECT_TRUE(std::isnan(plot.PixelY(0.0)));
  EXPECT_TRUE(std::isnan(plot.PixelY(-3.0)));
}

TEST(SvgPlotTest, SvgElementHasSizeViewBoxIdAndClass) {
  PlotOptions o;
  o.id = "plot-test";
  o.width_px = 400;
  o.height_px = 200;
  SvgPlot plot(o);
  plot.AddLine("", {0, 1}, {0, 1}, SeriesStyle());
  const std::string svg = plot.Render();
  EXPECT_EQ(svg.rfind("<svg xmlns=\"http://www.w3.org/2000/svg\"", 0), 0u);
  EXPECT_NE(svg.find("id=\"plot-test\""), std::string::npos);
  EXPECT_NE(svg.find("class=\"plot\""), std::string::npos);
  EXPECT_NE(svg.find("width=\"400\" height=\"200\" viewBox=\"0 0 400 200\""),
            std::string::npos);
  EXPECT_NE(svg.find("clip-path=\"url(#plot-test-clip)\""), std::string::npos);
}

TEST(SvgPlotTest, TextIsEscaped) {
  EXPECT_EQ(EscapeXml("a<b & \"c\" > 'd'"),
            "a&lt;b &amp; &quot;c&quot; &gt; &#39;d&#39;");
  EXPECT_EQ(EscapeXml(std::string("x\x01y")), "xy");  // not allowed in XML
  PlotOptions o;
  o.id = "p\"q";
  o.title = "Field <before> & \"after\"";
  o.x_label = "t < 5 s";
  SvgPlot plot(o);
  plot.AddLine("A & B", {0, 1}, {0, 1}, SeriesStyle());
  plot.AddSpan(0.2, 0.8, "<yaw>", "#eee");
  plot.AddLabel(0.5, 0.5, "x>y");
  const std::string svg = plot.Render();
  EXPECT_EQ(svg.find("<before>"), std::string::npos);
  EXPECT_EQ(svg.find("<yaw>"), std::string::npos);
  EXPECT_NE(svg.find("Field &lt;before&gt; &amp; &quot;after&quot;"), std::string::npos);
  EXPECT_NE(svg.find("t &lt; 5 s"), std::string::npos);
  EXPECT_NE(svg.find("A &amp; B"), std::string::npos);
  EXPECT_NE(svg.find("id=\"p&quot;q\""), std::string::npos);
  EXPECT_NE(svg.find("x&gt;y"), std::string::npos);
}

TEST(SvgPlotTest, NonFinitePointsBreakTheLine) {
  SvgPlot plot(PlotOptions{});
  plot.AddLine("", {0, 1, 2, 3, 4, 5, 6, 7},
               {1, 2, kNaN, 3, 4, kInf, 5, 6}, SeriesStyle());
  plot.AddPoints("", {0, 1, kNaN}, {kNaN, 2, 3}, {kInf, 0.5, 1}, SeriesStyle());
  const std::string svg = plot.Render();
  const auto lines = Polylines(svg);
  ASSERT_EQ(lines.size(), 3u);  // [0,1], [3,4], [6,7]
  for (const auto& l : lines) EXPECT_EQ(l.size(), 2u);
  EXPECT_FALSE(HasNonFiniteWord(svg));

  // On a log axis, values <= 0 break the line too.
  PlotOptions o;
  o.y_scale = AxisScale::kLog;
  SvgPlot log_plot(o);
  log_plot.AddLine("", {0, 1, 2, 3, 4}, {1, 10, -1, 0, 100}, SeriesStyle());
  const std::string log_svg = log_plot.Render();
  EXPECT_EQ(Polylines(log_svg).size(), 1u);  // [0,1]; 100 is a lone point
  EXPECT_EQ(Count(log_svg, "<circle"), 1u);
  EXPECT_FALSE(HasNonFiniteWord(log_svg));
}

TEST(SvgPlotTest, MinMaxDecimationKeepsExtremesAndBudget) {
  const std::size_t n = 1000000;
  std::vector<double> x(n), y(n);
  for (std::size_t i = 0; i < n; ++i) {
    x[i] = 0.01 * static_cast<double>(i);
    y[i] = std::sin(1e-4 * static_cast<double>(i));
  }
  y[123457] = 9.0;   // a single-sample spike
  y[876543] = -7.0;
  const std::vector<std::size_t> keep = MinMaxDecimate(y, 0, n, 1000);
  EXPECT_LE(keep.size(), 1000u);
  EXPECT_EQ(keep.front(), 0u);
  EXPECT_EQ(keep.back(), n - 1);
  bool spike = false, dip = false;
  for (std::size_t i = 1; i < keep.size(); ++i) {
    ASSERT_GT(keep[i], keep[i - 1]);  // original order
    spike |= keep[i] == 123457;
    dip |= keep[i] == 876543;
  }
  EXPECT_TRUE(spike);
  EXPECT_TRUE(dip);

  PlotOptions o;
  o.max_points_per_line = 800;
  o.y_min = -10;
  o.y_max = 10;
  SvgPlot plot(o);
  plot.AddLine("", x, y, SeriesStyle());
  const auto lines = Polylines(plot.Render());
  ASSERT_EQ(lines.size(), 1u);
  EXPECT_LE(lines[0].size(), 800u);
  double top = 1e9;
  for (const auto& p : lines[0]) top = std::min(top, p.second);
  EXPECT_NEAR(top, plot.PixelY(9.0), kPixelTol);  // the spike is drawn

  // Short runs are left alone.
  EXPECT_EQ(MinMaxDecimate(y, 10, 20, 1000).size(), 10u);
}

TEST(SvgPlotTest, GroupedBarsAndErrorBars) {
  PlotOptions o;
  o.id = "bars";
  SvgPlot plot(o);
  plot.SetCategories({"pitch", "roll", "yaw"});
  SeriesStyle a;
  a.colour = "#aa0000";
  SeriesStyle b;
  b.colour = "#0000aa";
  plot.AddBars("before", {10, 20, 5}, {}, a);
  plot.AddBars("after", {1, 2, 0.5}, {0.5, 0.5, 0.5}, b);
  const std::string svg = plot.Render();
  EXPECT_EQ(Count(svg, "fill=\"#aa0000\""), 3u + 1u);  // bars + legend swatch
  EXPECT_EQ(Count(svg, "fill=\"#0000aa\""), 3u + 1u);
  EXPECT_NE(svg.find(">pitch</text>"), std::string::npos);
  EXPECT_NE(svg.find(">yaw</text>"), std::string::npos);
  // Bars rise from zero: the range includes 0.
  EXPECT_LE(plot.YTicks().lo, 0.0);
  // Series side by side: "before" left of the category centre, "after"
  // right of it.
  bool found = false;
  for (const std::string& tag : TagsOf(svg, "rect")) {
    if (Attr(tag, "fill") != "#aa0000") continue;
    if (Attr(tag, "width") == "10" && Attr(tag, "height") == "10") continue;  // legend
    const double centre = std::stod(Attr(tag, "x")) + std::stod(Attr(tag, "width")) / 2;
    EXPECT_LT(centre, plot.PixelX(0.0));  // first bar of the first category
    found = true;
    break;
  }
  EXPECT_TRUE(found);
  // Error bar of "after" on category 1 spans 1.5 .. 2.5: paths "Mx,yVy...".
  std::vector<std::pair<double, double>> spans;
  for (const std::string& tag : TagsOf(svg, "path")) {
    if (Attr(tag, "stroke-width") != "1.2") continue;
    const std::string d = Attr(tag, "d");
    const std::size_t comma = d.find(','), v = d.find('V'), next = d.find('M', 1);
    spans.emplace_back(std::stod(d.substr(comma + 1, v - comma - 1)),
                       std::stod(d.substr(v + 1, next - v - 1)));
  }
  ASSERT_EQ(spans.size(), 3u);
  EXPECT_NEAR(spans[1].first, plot.PixelY(2.5), kPixelTol);
  EXPECT_NEAR(spans[1].second, plot.PixelY(1.5), kPixelTol);
}

TEST(SvgPlotTest, EqualAspectDrawsUnitsAlike) {
  PlotOptions o;
  o.width_px = 500;
  o.height_px = 300;
  o.x_unit_in_y_units = 0.5;  // e.g. cos(60 deg) for lon/lat at 60 deg
  SvgPlot plot(o);
  plot.AddLine("", {10.0, 10.4, 10.4}, {60.0, 60.0, 60.05}, SeriesStyle());
  const double px_per_x = plot.PixelX(11.0) - plot.PixelX(10.0);
  const double px_per_y = plot.PixelY(60.0) - plot.PixelY(61.0);
  EXPECT_NEAR(px_per_x, 0.5 * px_per_y, 1e-6 * px_per_y);
  // Data still inside the axes.
  const AxisTicks xt = plot.XTicks(), yt = plot.YTicks();
  EXPECT_LE(xt.lo, 10.0);
  EXPECT_GE(xt.hi, 10.4);
  EXPECT_LE(yt.lo, 60.0);
  EXPECT_GE(yt.hi, 60.05);
}

// Labels stay legible: y ticks at least ~20 px apart on a short plot,
// and x labels never drawn over each other (the writer skips some).
TEST(SvgPlotTest, TicksNeverCrowdTheAxis) {
  PlotOptions o;
  o.height_px = 150;
  o.y_tick_intervals = 8;
  SvgPlot plot(o);
  plot.AddLine("", {0, 1, 2}, {0.0, 0.32, 0.1}, SeriesStyle());
  const AxisTicks y = plot.YTicks();
  ASSERT_GE(y.values.size(), 2u);
  EXPECT_GE(plot.PixelY(y.values[0]) - plot.PixelY(y.values[1]), 20.0);

  PlotOptions wide;
  wide.width_px = 200;
  wide.x_tick_intervals = 20;
  SvgPlot dense(wide);
  dense.AddLine("", {100000, 200000}, {0, 1}, SeriesStyle());
  const std::string svg = dense.Render();
  // Label boxes (0.6 em per character, as the writer estimates) of the
  // drawn x labels do not overlap.
  double last_right = -1e9;
  for (const std::string& tag : TagsOf(svg, "text")) {
    if (Attr(tag, "text-anchor") != "middle" || !Attr(tag, "transform").empty()) continue;
    const std::size_t b = svg.find(tag) + tag.size();
    const std::string label = svg.substr(b, svg.find('<', b) - b);
    if (label.empty() || !std::isdigit(static_cast<unsigned char>(label[0]))) continue;
    const double x = std::stod(Attr(tag, "x"));
    const double half = 0.6 * 11.0 * static_cast<double>(label.size()) / 2;
    EXPECT_GE(x - half, last_right) << label;
    last_right = x + half;
  }
}

TEST(SvgPlotTest, EmptyPlotShowsItsNote) {
  PlotOptions o;
  o.title = "Nothing";
  SvgPlot plot(o);
  plot.AddLine("before", {}, {}, SeriesStyle());
  plot.AddNote("no data");
  const std::string svg = plot.Render();
  EXPECT_NE(svg.find(">no data</text>"), std::string::npos);
  EXPECT_EQ(svg.find("nan"), std::string::npos);
}

TEST(SvgPlotTest, SvgNumberNeverPrintsNan) {
  EXPECT_EQ(SvgNumber(kNaN), "0");
  EXPECT_EQ(SvgNumber(-kInf), "0");
  EXPECT_EQ(SvgNumber(12.0), "12");
  EXPECT_EQ(SvgNumber(-0.04), "0");
  EXPECT_EQ(SvgNumber(3.14159, 2), "3.14");
}

// Well-formedness by an outside parser: every kind of element in one file
// per plot, parsed by Python's xml.etree.
TEST(SvgPlotTest, OutputIsWellFormedXml) {
  const fs::path dir = fs::temp_directory_path() /
                       ("fluxtrim_svg_test_" + std::to_string(::getpid()));
  fs::create_directories(dir);
  std::vector<std::string> files;
  auto save = [&](const SvgPlot& p) {
    const fs::path f = dir / ("p" + std::to_string(files.size()) + ".svg");
    std::ofstream(f, std::ios::binary) << p.Render();
    files.push_back(f.string());
  };
  {
    PlotOptions o;
    o.id = "lines";
    o.title = "A & B <c>";
    o.x_label = "time (s)";
    o.y_label = "field (nT)";
    SvgPlot p(o);
    p.AddSpan(1, 2, "pitch", "#f6e7c8");
    p.AddLine("before", {0, 1, 2, 3}, {1, kNaN, 2, 3}, SeriesStyle());
    p.AddPoints("pts", {0.5}, {1.5}, {0.2}, SeriesStyle());
    p.AddHorizontalLine(0, SeriesStyle());
    p.AddLabel(1, 1, "start \"here\"");
    p.AddNote("note 'x'");
    save(p);
  }
  {
    PlotOptions o;
    o.id = "bars-log";
    o.y_scale = AxisScale::kLog;
    SvgPlot p(o);
    p.SetCategories({"\xCF\x83" "1", "\xCF\x83" "2", "<3>"});
    p.AddBars("s", {100, 0.0, 3}, {10, 1, kNaN}, SeriesStyle(), {"#111", "#222", "#333"});
    save(p);
  }
  {
    SvgPlot p(PlotOptions{});  // nothing at all
    save(p);
  }
  const fs::path script = dir / "check.py";
  std::ofstream(script) << R"PY(
import sys, xml.etree.ElementTree as ET
for name in sys.argv[1:]:
    root = ET.parse(name).getroot()
    assert root.tag == '{http://www.w3.org/2000/svg}svg', root.tag
    for attr in ('width', 'height', 'viewBox'):
        assert attr in root.attrib, attr
    for el in root.iter():
        for k, v in el.attrib.items():
            assert 'nan' not in v.lower() and 'inf' not in v.lower(), (k, v)
print('ok')
)PY";
  std::string cmd = std::string(FLUXTRIM_PYTHON) + " " + script.string();
  for (const auto& f : files) cmd += " " + f;
  EXPECT_EQ(std::system(cmd.c_str()), 0) << cmd;
  fs::remove_all(dir);
}

}  // namespace
}  // namespace fluxtrim::core
