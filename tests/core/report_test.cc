// Report page: content, self-containment and escaping. The SVG blocks are
// parsed by Python's xml.etree (FLUXTRIM_PYTHON) as an outside XML checker.
//
// Set FLUXTRIM_REPORT_OUT=/path/report.html to also write the demo fit
// report there for a look in a browser (FLUXTRIM_REPORT_OUT_APPLY for the
// apply variant).

#include "src/core/report.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include <unistd.h>

#include "src/core/cautions.h"
#include "src/core/svg.h"
#include "tests/core/markup_scan.h"
#include "tests/core/report_demo.h"

namespace fluxtrim::core {
namespace {

namespace fs = std::filesystem;
using report_testing::DemoApplyReportData;
using report_testing::DemoFitReportData;

fs::path TempDir(const std::string& name) {
  const fs::path dir = fs::temp_directory_path() /
                       ("fluxtrim_report_test_" + std::to_string(::getpid()) + "_" + name);
  fs::create_directories(dir);
  return dir;
}

std::string ReadFile(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

std::size_t Count(const std::string& haystack, const std::string& needle) {
  std::size_t n = 0;
  for (std::size_t p = haystack.find(needle); p != std::string::npos;
       p = haystack.find(needle, p + needle.size())) {
    ++n;
  }
  return n;
}

std::string Lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

// Every <svg ...>...</svg> block of the page.
std::vector<std::string> SvgBlocks(const std::string& html) {
  std::vector<std::string> out;
  for (std::size_t p = html.find("<svg"); p != std::string::npos;
       p = html.find("<svg", p + 4)) {
    const std::size_t e = html.find("</svg>", p);
    if (e == std::string::npos) break;
    out.push_back(html.substr(p, e + 6 - p));
  }
  return out;
}

// Runs xml.etree on each SVG block (one file per block); returns Python's
// exit status (0 = every block parsed, root is svg with width, height and
// viewBox).
int CheckSvgBlocksWithPython(const std::vector<std::string>& blocks,
                             const fs::path& dir) {
  std::vector<std::string> files;
  for (std::size_t i = 0; i < blocks.size(); ++i) {
    const fs::path p = dir / ("block" + std::to_string(i) + ".svg");
    std::ofstream(p, std::ios::binary) << blocks[i];
    files.push_back(p.string());
  }
  const fs::path script = dir / "check.py";
  std::ofstream(script) << R"PY(
import sys, xml.etree.ElementTree as ET
NS = '{http://www.w3.org/2000/svg}'
for name in sys.argv[1:]:
    root = ET.parse(name).getroot()
    assert root.tag == NS + 'svg', (name, root.tag)
    for attr in ('width', 'height', 'viewBox', 'id'):
        assert attr in root.attrib, (name, attr)
    assert 'plot' in root.attrib.get('class', '').split(), name
print('ok', len(sys.argv) - 1)
)PY";
  std::string cmd = std::string(FLUXTRIM_PYTHON) + " " + script.string();
  for (const auto& f : files) cmd += " " + f;
  return std::system(cmd.c_str());
}

TEST(ReportTest, FitReportContainsEveryPlotAndSection) {
  const ReportData data = DemoFitReportData();
  const std::string html = BuildReport(data);
  // The list the page must hold for a fit with aux channels (report.h).
  const std::vector<std::string> expected = {
      "plot-field-0",        "plot-field-1",      "plot-field-2",
      "plot-field-3",        "plot-maneuvers",    "plot-coef-permanent",
      "plot-coef-induced",   "plot-coef-eddy",    "plot-coef-aux",
      "plot-excitation",     "plot-spectrum",     "plot-track",
      "plot-attitude",       "plot-heading"};
  for (const auto& id : expected) {
    EXPECT_EQ(Count(html, "id=\"" + id + "\""), 1u) << id;
  }
  std::vector<std::string> listed = ReportPlotIds(data);
  std::vector<std::string> sorted_expected = expected;
  std::sort(listed.begin(), listed.end());
  std::sort(sorted_expected.begin(), sorted_expected.end());
  EXPECT_EQ(listed, sorted_expected);
  // Each plot is an <svg class="plot">.
  EXPECT_EQ(Count(html, "class=\"plot\""), expected.size());
  EXPECT_NE(html.find("<!DOCTYPE html>"), std::string::npos);
  EXPECT_NE(html.find("Sum (FOM)"), std::string::npos);
  EXPECT_NE(html.find("Leave-one-heading-out"), std::string::npos);
  EXPECT_NE(html.find("ZK-QFT"), std::string::npos);
  // Maneuvers shaded and labelled on the heading panels.
  EXPECT_GE(Count(html, ">pitch</text>"), 4u);
  EXPECT_GE(Count(html, ">roll</text>"), 4u);
  EXPECT_GE(Count(html, ">yaw</text>"), 4u);
  // Heading panels (with maneuvers) do not draw the difference trace.
  EXPECT_EQ(Count(html, ">before \xE2\x88\x92 after</text>"), 0u);
}

TEST(ReportTest, PageIsSelfContained) {
  const std::string html = BuildReport(DemoFitReportData());
  const std::string lower = Lower(html);
  EXPECT_EQ(lower.find("<script"), std::string::npos);
  EXPECT_EQ(lower.find("javascript:"), std::string::npos);
  EXPECT_EQ(lower.find("@import"), std::string::npos);
  EXPECT_EQ(lower.find("@font-face"), std::string::npos);
  EXPECT_EQ(lower.find(" src="), std::string::npos);
  EXPECT_EQ(lower.find(" href="), std::string::npos);
  EXPECT_EQ(lower.find("<link"), std::string::npos);
  EXPECT_EQ(lower.find("<img"), std::string::npos);
  // url(...) only for in-page clip paths.
  EXPECT_EQ(Count(lower, "url("), Count(lower, "url(#"));
  // The only URLs are the SVG namespace name, which is never fetched.
  const std::string ns = "http://www.w3.org/2000/svg";
  EXPECT_EQ(Count(lower, "http://"), Count(lower, "xmlns=\"" + ns + "\""));
  EXPECT_EQ(Count(lower, "https://"), 0u);
  EXPECT_EQ(Count(lower, "//"), Count(lower, "xmlns=\"" + ns + "\""));
}

// Non-finite values in data must never reach the page as text.
TEST(ReportTest, NonFiniteValuesNeverAppearAsText) {
  ReportData data = DemoFitReportData();
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double inf = std::numeric_limits<double>::infinity();
  data.fom_after_nT = nan;
  data.improvement_ratio = inf;
  data.lag_s = nan;
  data.maneuvers[3].p2p_after = nan;
  data.coefficients[4].std_error = nan;
  data.coefficients[5].value = inf;
  data.excitation[1].singular_values[4] = 0.0;  // log axis: not drawable
  data.panels[1].before[50] = nan;
  data.panels[1].after[51] = inf;
  data.lat_deg[10] = nan;
  data.spectrum_before[500] = nan;
  data.roll_deg[7] = -inf;
  const std::string html = BuildReport(data);
  // Scan attribute values and text separately so a hit says where it is.
  for (const std::string& v : report_testing::AttributeValues(html)) {
    ASSERT_FALSE(report_testing::HasNonFiniteWord(v)) << "attribute: " << v;
  }
  for (const std::string& t : report_testing::TextRuns(html)) {
    ASSERT_FALSE(report_testing::HasNonFiniteWord(t)) << "text: " << t;
  }
  ASSERT_FALSE(report_testing::HasNonFiniteWord(html));
  EXPECT_NE(html.find("n/a"), std::string::npos);
}

TEST(ReportTest, SvgBlocksAreWellFormedXml) {
  const std::string html = BuildReport(DemoFitReportData());
  const std::vector<std::string> blocks = SvgBlocks(html);
  ASSERT_EQ(blocks.size(), ReportPlotIds(DemoFitReportData()).size());
  const fs::path dir = TempDir("xml");
  EXPECT_EQ(CheckSvgBlocksWithPython(blocks, dir), 0);
  fs::remove_all(dir);
}

TEST(ReportTest, TextIsEscaped) {
  ReportData data = DemoFitReportData();
  data.input_file = "box<1>&\"2\".csv";
  data.platform = "<b>bold</b>";
  data.panels[0].title = "Heading <000> & co";
  const std::string html = BuildReport(data);
  EXPECT_EQ(html.find("<b>bold</b>"), std::string::npos);
  EXPECT_NE(html.find("&lt;b&gt;bold&lt;/b&gt;"), std::string::npos);
  EXPECT_NE(html.find("box&lt;1&gt;&amp;&quot;2&quot;.csv"), std::string::npos);
  EXPECT_NE(html.find("Heading &lt;000&gt; &amp; co"), std::string::npos);
  // The demo warning holds "<" and "&".
  EXPECT_NE(html.find("(2.4 &lt; 3)"), std::string::npos);
  EXPECT_NE(html.find("ind_xz &amp; ind_yz"), std::string::npos);
}

TEST(ReportTest, CautionsFollowTheJob) {
  ReportData data = DemoFitReportData();
  std::string html = BuildReport(data);
  EXPECT_NE(html.find(EscapeXml(kFlightCaution)), std::string::npos);
  EXPECT_EQ(html.find(EscapeXml(kOrdnanceCaution)), std::string::npos);
  data.ordnance_search = true;
  html = BuildReport(data);
  EXPECT_NE(html.find(EscapeXml(kFlightCaution)), std::string::npos);
  EXPECT_NE(html.find(EscapeXml(kOrdnanceCaution)), std::string::npos);
}

TEST(ReportTest, ApplyReportHasLinePanelsAndNoManeuverPlots) {
  const ReportData data = DemoApplyReportData();
  const std::string html = BuildReport(data);
  EXPECT_NE(html.find("id=\"plot-field-0\""), std::string::npos);
  EXPECT_NE(html.find("id=\"plot-field-1\""), std::string::npos);
  EXPECT_EQ(html.find("id=\"plot-field-2\""), std::string::npos);
  EXPECT_EQ(html.find("id=\"plot-maneuvers\""), std::string::npos);
  EXPECT_EQ(html.find("id=\"plot-excitation\""), std::string::npos);
  EXPECT_NE(html.find("id=\"plot-spectrum\""), std::string::npos);
  EXPECT_NE(html.find("Line 1010"), std::string::npos);
  // Survey-line panels also draw the removed interference, before - after.
  EXPECT_EQ(Count(html, ">before \xE2\x88\x92 after</text>"), 2u);
  EXPECT_NE(html.find(std::string("stroke=\"") + kReportColourRemoved + "\""),
            std::string::npos);
  EXPECT_NE(html.find("Compensation applied"), std::string::npos);
  for (const auto& id : ReportPlotIds(data)) {
    EXPECT_EQ(Count(html, "id=\"" + id + "\""), 1u) << id;
  }
  EXPECT_EQ(Count(html, "class=\"plot\""), ReportPlotIds(data).size());
}

TEST(ReportTest, EmptyDataStillMakesAValidPage) {
  ReportData data;
  const std::string html = BuildReport(data);
  EXPECT_NE(html.find("</html>"), std::string::npos);
  EXPECT_TRUE(ReportPlotIds(data).empty());
  EXPECT_EQ(Count(html, "class=\"plot\""), 0u);
  EXPECT_NE(html.find(EscapeXml(kFlightCaution)), std::string::npos);
  EXPECT_FALSE(report_testing::HasNonFiniteWord(html));
}

// Long records are decimated: a two-hour 100 Hz panel (720 000 samples per
// series) must not make a page of tens of megabytes.
TEST(ReportTest, LongSeriesAreDecimated) {
  ReportData data;
  data.sample_rate_hz = 100.0;
  ReportPanel p;
  p.title = "Line 2000";
  const std::size_t n = 720000;
  p.time_s.resize(n);
  p.before.resize(n);
  p.after.resize(n);
  for (std::size_t i = 0; i < n; ++i) {
    p.time_s[i] = 0.01 * static_cast<double>(i);
    p.before[i] = std::sin(0.001 * static_cast<double>(i));
    p.after[i] = 0.1 * std::sin(0.0013 * static_cast<double>(i));
  }
  data.panels.push_back(p);
  const std::string html = BuildReport(data);
  ReportOptions options;
  // Two series of at most max_points_per_line points, about 12 bytes each,
  // plus the page's fixed part (< 30 kB): 100 kB is a generous bound.
  EXPECT_LT(html.size(), 100000u + 2 * 12 * options.max_points_per_line);
}

TEST(ReportTest, TermGroupsComeFromNamePrefixes) {
  EXPECT_EQ(TermGroupOf("perm_x"), "permanent");
  EXPECT_EQ(TermGroupOf("ind_yz"), "induced");
  EXPECT_EQ(TermGroupOf("eddy_zx"), "eddy");
  EXPECT_EQ(TermGroupOf("aux_i_motor_y"), "aux");
  EXPECT_EQ(TermGroupOf("offset"), "other");
}

TEST(ReportTest, WriteReportWritesTheSamePageAndNamesABadPath) {
  const ReportData data = DemoFitReportData();
  const fs::path dir = TempDir("write");
  const fs::path path = dir / "report.html";
  WriteReport(path.string(), data);
  EXPECT_EQ(ReadFile(path), BuildReport(data));
  const std::string bad = (dir / "no_such_dir" / "report.html").string();
  try {
    WriteReport(bad, data);
    ADD_FAILURE() << "expected an exception";
  } catch (const std::runtime_error& e) {
    EXPECT_NE(std::string(e.what()).find(bad), std::string::npos) << e.what();
  }
  fs::remove_all(dir);
}

// Writes the demo reports where the developer asked (no check beyond
// "written"): FLUXTRIM_REPORT_OUT and FLUXTRIM_REPORT_OUT_APPLY.
TEST(ReportTest, WritesDemoReportsWhenAsked) {
  const char* fit_out = std::getenv("FLUXTRIM_REPORT_OUT");
  const char* apply_out = std::getenv("FLUXTRIM_REPORT_OUT_APPLY");
  if (fit_out == nullptr && apply_out == nullptr) {
    GTEST_SKIP() << "set FLUXTRIM_REPORT_OUT=/path/report.html to write the demo";
  }
  if (fit_out != nullptr) {
    WriteReport(fit_out, DemoFitReportData());
    EXPECT_TRUE(fs::exists(fit_out));
  }
  if (apply_out != nullptr) {
    WriteReport(apply_out, DemoApplyReportData());
    EXPECT_TRUE(fs::exists(apply_out));
  }
}

}  // namespace
}  // namespace fluxtrim::core
