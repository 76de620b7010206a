// The report in a real browser: Debian's chromium, headless, renders the
// page; tests/core/browser_check.py (run with FLUXTRIM_PYTHON) fails on any
// script error, failed or attempted resource load, or console message, and
// on any plot that is missing, tiny, blank or without its data colours
// (see that script for the method). Skipped when chromium is not
// installed (apt-get install -y chromium; python3-pil makes the PNG
// decoding faster but is optional).
//
// FLUXTRIM_CHROMIUM overrides the browser path; FLUXTRIM_REPORT_PNG=/path
// keeps the fit report's screenshot.

#include <gtest/gtest.h>
#include <unistd.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include "src/core/report.h"
#include "tests/core/report_demo.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::core {
namespace {

namespace fs = std::filesystem;

std::string ChromiumPath() {
  const char* env = std::getenv("FLUXTRIM_CHROMIUM");
  const std::string path = env != nullptr ? env : "/usr/bin/chromium";
  return fs::exists(path) ? path : "";
}

std::string Join(const std::vector<std::string>& v) {
  std::string out;
  for (const auto& s : v) out += (out.empty() ? "" : ",") + s;
  return out;
}

class ReportBrowserTest : public ::testing::Test {
 protected:
  void SetUp() override {
    chromium_ = ChromiumPath();
    if (chromium_.empty()) {
      GTEST_SKIP() << "chromium not installed (apt-get install -y chromium): "
                      "browser rendering of the report not checked";
    }
    dir_ = fs::temp_directory_path() /
           ("fluxtrim_browser_test_" + std::to_string(::getpid()) + "_" +
            ::testing::UnitTest::GetInstance()->current_test_info()->name());
    fs::create_directories(dir_);
  }
  void TearDown() override {
    if (!dir_.empty()) fs::remove_all(dir_);
  }

  // Runs browser_check.py; returns its exit status and its output.
  int Check(const fs::path& html, const std::vector<std::string>& ids,
            const std::string& extra, std::string* output) {
    const std::string cmd =
        std::string(FLUXTRIM_PYTHON) + " " + FLUXTRIM_SOURCE_DIR +
        "/tests/core/browser_check.py --chromium '" + chromium_ + "' --html '" +
        html.string() + "' --ids '" + Join(ids) + "' " + extra + " 2>&1";
    const test_support::CommandResult run = test_support::RunCommand(cmd);
    output->append(run.output);
    return run.code;
  }

  // Every plot must show its data colours, not only axes.
  static std::string ColourExpectations() {
    const std::string before_after =
        std::string(kReportColourBefore) + "," + kReportColourAfter;
    return "--expect-colour plot-field-=" + before_after +
           " --expect-colour plot-maneuvers=" + before_after +
           " --expect-colour plot-spectrum=" + before_after +
           " --expect-colour plot-coef-permanent=" + kReportColourPermanent +
           " --expect-colour plot-coef-induced=" + kReportColourInduced +
           " --expect-colour plot-coef-eddy=" + kReportColourEddy +
           " --expect-colour plot-coef-aux=" + kReportColourAux +
           " --expect-colour plot-excitation=" + kReportColourPermanent + "," +
           kReportColourInduced + "," + kReportColourEddy + "," + kReportColourAux +
           " --expect-colour plot-attitude=" + kReportColourRoll + "," +
           kReportColourPitch +
           " --expect-colour plot-heading=" + kReportColourHeading +
           " --expect-colour plot-track=" + kReportColourTrack + "," +
           kReportColourStart + "," + kReportColourEnd;
  }

  std::string chromium_;
  fs::path dir_;
};

TEST_F(ReportBrowserTest, FitReportRendersEveryPlotWithoutErrors) {
  const ReportData data = report_testing::DemoFitReportData();
  const fs::path html = dir_ / "fit.html";
  WriteReport(html.string(), data);
  std::string extra = ColourExpectations();
  if (const char* png = std::getenv("FLUXTRIM_REPORT_PNG")) {
    extra += std::string(" --png '") + png + "'";
  }
  std::string output;
  const std::vector<std::string> ids = ReportPlotIds(data);
  ASSERT_EQ(ids.size(), 14u);
  EXPECT_EQ(Check(html, ids, extra, &output), 0) << output;
}

TEST_F(ReportBrowserTest, ApplyReportRendersEveryPlotWithoutErrors) {
  const ReportData data = report_testing::DemoApplyReportData();
  const fs::path html = dir_ / "apply.html";
  WriteReport(html.string(), data);
  std::string output;
  EXPECT_EQ(Check(html, ReportPlotIds(data), ColourExpectations(), &output), 0)
      << output;
}

// The checker itself must be able to fail: a page that loads a missing
// image, holds an empty plot and lacks a listed one.
TEST_F(ReportBrowserTest, CheckerRejectsABrokenPage) {
  const fs::path html = dir_ / "broken.html";
  std::ofstream(html)
      << "<!DOCTYPE html><html><head><meta charset=\"utf-8\"></head><body>"
         "<img src=\"missing.png\" alt=\"\">"
         "<svg xmlns=\"http://www.w3.org/2000/svg\" id=\"plot-blank\" "
         "class=\"plot\" width=\"400\" height=\"200\" viewBox=\"0 0 400 200\">"
         "<rect width=\"100%\" height=\"100%\" fill=\"#fff\"/></svg>"
         "</body></html>\n";
  std::string output;
  EXPECT_EQ(Check(html, {"plot-blank", "plot-missing"},
                  "--expect-colour plot-blank=#c8553d", &output),
            1)
      << output;
  EXPECT_NE(output.find("missing.png"), std::string::npos) << output;
  EXPECT_NE(output.find("plot-blank: looks blank"), std::string::npos) << output;
  EXPECT_NE(output.find("plot-blank: colour #c8553d"), std::string::npos) << output;
  EXPECT_NE(output.find("plot-missing: not in the page"), std::string::npos) << output;
}

}  // namespace
}  // namespace fluxtrim::core
