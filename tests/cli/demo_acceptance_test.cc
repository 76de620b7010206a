// Acceptance of the fit -> apply chain on the demo flights, through the
// real binary (FLUXTRIM_EXE), against the simulator's truth
// (flights/truth/*.csv, written by `fluxtrim simulate` from the scenarios
// in flights/; physics, not the Tolles-Lawson formula run backwards).
//
// Apply issue, acceptance: "Fit on the demo box and apply to the demo survey
// lines flown with the same aircraft: the band-passed interference on the
// lines is removed to within 2 x the injected noise RMS".

#include <sys/wait.h>

#include <cmath>
#include <cstdlib>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include <google/protobuf/util/json_util.h>
#include <gtest/gtest.h>

#include "io/recording.h"
#include "io/table.h"
#include "proto/apply_summary.pb.h"
#include "src/core/butterworth.h"

namespace {

using fluxtrim::core::BandPass;
using fluxtrim::core::BandPassOptions;
using fluxtrim::io::Table;

const std::string kFlights = std::string(FLUXTRIM_SOURCE_DIR) + "/flights/";

int Fluxtrim(const std::string& args) {
  const std::string cmd = std::string(FLUXTRIM_EXE) + " " + args + " > " +
                          ::testing::TempDir() + "run.log 2>&1";
  const int status = std::system(cmd.c_str());
  return WIFEXITED(status) ? WEXITSTATUS(status) : -1;
}

std::string Slurp(const std::string& path) {
  std::ifstream in(path);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

double Rms(const std::vector<double>& x) {
  double s = 0;
  for (double v : x) s += v * v;
  return x.empty() ? NAN : std::sqrt(s / static_cast<double>(x.size()));
}

// The model fitted once on the demo box, shared by the tests.
class DemoChain : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    model_ = ::testing::TempDir() + "demo_box.model";
    ASSERT_EQ(Fluxtrim("fit " + kFlights + "demo_box.csv -o " + model_), 0)
        << Slurp(::testing::TempDir() + "run.log");
  }
  static std::string model_;
};
std::string DemoChain::model_;

TEST_F(DemoChain, SurveyLineInterferenceIsRemovedToWithinTwiceTheInjectedNoise) {
  const std::string out = ::testing::TempDir() + "lines_comp.csv";
  ASSERT_EQ(Fluxtrim("apply " + model_ + " " + kFlights + "demo_lines.csv -o " + out),
            0)
      << Slurp(::testing::TempDir() + "run.log");
  const Table comp = fluxtrim::io::ReadRecording(out);
  const Table truth =
      fluxtrim::io::ReadRecording(kFlights + "truth/demo_lines_truth.csv");
  ASSERT_EQ(comp.rows(), truth.rows());
  const std::vector<double>& time = comp.Column("time");
  const std::vector<double>& flags = comp.Column("flags");
  const std::vector<double>& estimate = comp.Column("f_interference");
  const std::vector<double>& true_interference =
      truth.Column("f_interference_true");
  const std::vector<double>& noise = truth.Column("noise_f");
  for (std::size_t i = 0; i < comp.rows(); ++i) {
    ASSERT_EQ(time[i], truth.Column("time")[i]) << i;
  }
  const double rate =
      static_cast<double>(time.size() - 1) / (time.back() - time.front());
  // The fit's band (4th-order Butterworth, 0.1-0.9 Hz, zero phase; checked
  // against scipy in tests/core/butterworth_test).
  const BandPass band(BandPassOptions{}, rate);

  // Error of the modelled interference, per contiguous run of samples; the
  // mean level (the model's convention, and DC) is removed by the band-pass.
  std::vector<double> error_kept, noise_kept, raw_noise_kept;
  const std::size_t trim = static_cast<std::size_t>(10.0 * rate);  // 1/low_hz
  std::size_t start = 0;
  for (std::size_t i = 1; i <= time.size(); ++i) {
    if (i < time.size() && time[i] - time[i - 1] < 1.5 / rate) continue;
    const std::size_t n = i - start;
    if (n > band.min_length() + 2 * trim) {
      std::vector<double> e(n), w(n);
      for (std::size_t j = 0; j < n; ++j) {
        e[j] = estimate[start + j] - true_interference[start + j];
        w[j] = noise[start + j];
      }
      e = band.Filter(e);
      w = band.Filter(w);
      // Filter transients at run ends and flagged samples (derivative not
      // valid, lag edge) are not part of the comparison.
      for (std::size_t j = trim; j + trim < n; ++j) {
        if (flags[start + j] != 0) continue;
        error_kept.push_back(e[j]);
        noise_kept.push_back(w[j]);
        raw_noise_kept.push_back(noise[start + j]);
      }
    }
    start = i;
  }
  ASSERT_GT(error_kept.size(), comp.rows() / 2);
  const double error_rms = Rms(error_kept);
  const double noise_rms = Rms(raw_noise_kept);
  const double band_noise_rms = Rms(noise_kept);
  std::printf(
      "band-passed interference error %.5f nT; injected noise %.5f nT "
      "(band-passed %.5f nT)\n",
      error_rms, noise_rms, band_noise_rms);
  // The scenario injects 0.005 nT of scalar noise (demo_lines.scenario).
  EXPECT_NEAR(noise_rms, 0.005, 0.0005);
  EXPECT_LE(error_rms, 2.0 * noise_rms);
  // And the model did remove something: the band-passed true interference
  // is two orders above the error.
  std::vector<double> t(true_interference.begin(), true_interference.end());
  EXPECT_GT(Rms(band.FilterWithGaps(t)), 20.0 * error_rms);
}

TEST_F(DemoChain, ValidationBoxFlownLaterReportsTheFomBeforeAndAfter) {
  const std::string out = ::testing::TempDir() + "validation_comp.csv";
  const std::string json = ::testing::TempDir() + "validation.json";
  ASSERT_EQ(Fluxtrim("apply " + model_ + " " + kFlights +
                "demo_validation_box.csv -o " + out + " --summary-json " + json),
            0)
      << Slurp(::testing::TempDir() + "run.log");
  fluxtrim::proto::ApplySummary s;
  ASSERT_TRUE(google::protobuf::util::JsonStringToMessage(Slurp(json), &s).ok());
  EXPECT_EQ(s.maneuvers_size(), 12);
  ASSERT_GT(s.fom_after_nt(), 0.0);
  // Fit issue acceptance: FOM drops by >= 20x (a box flown later with the
  // same aircraft must show the same).
  EXPECT_GT(s.fom_before_nt() / s.fom_after_nt(), 20.0)
      << s.fom_before_nt() << " -> " << s.fom_after_nt();
}

// Apply issue, reports: `fit --report` and `apply --report` write one
// self-contained page with every plot the issue lists.
TEST_F(DemoChain, FitAndApplyReportsHoldEveryPlotAndNoOutsideResource) {
  const std::string fit_html = ::testing::TempDir() + "fit_report.html";
  ASSERT_EQ(Fluxtrim("fit " + kFlights + "demo_box.csv -o " +
                     ::testing::TempDir() + "again.model --report " + fit_html),
            0)
      << Slurp(::testing::TempDir() + "run.log");
  const std::string fit_page = Slurp(fit_html);
  for (const char* id :
       {"plot-heading", "plot-maneuvers", "plot-coef-permanent",
        "plot-coef-induced", "plot-coef-eddy", "plot-excitation",
        "plot-spectrum", "plot-attitude", "plot-track"}) {
    EXPECT_NE(fit_page.find(std::string("id=\"") + id + "\""), std::string::npos)
        << id;
  }
  const std::string apply_html = ::testing::TempDir() + "apply_report.html";
  ASSERT_EQ(Fluxtrim("apply " + model_ + " " + kFlights + "demo_lines.csv -o " +
                     ::testing::TempDir() + "lines2.csv --report " + apply_html),
            0)
      << Slurp(::testing::TempDir() + "run.log");
  const std::string apply_page = Slurp(apply_html);
  EXPECT_NE(apply_page.find("id=\"plot-spectrum\""), std::string::npos);
  for (const std::string& page : {fit_page, apply_page}) {
    EXPECT_NE(page.find("<svg"), std::string::npos);
    EXPECT_EQ(page.find("<script"), std::string::npos);
    EXPECT_EQ(page.find("src=\"http"), std::string::npos);
    EXPECT_EQ(page.find("href=\"http"), std::string::npos);
  }
}

}  // namespace
