// End to end: the built `fluxtrim fit` on simulated recordings written to
// disk.
#include <sys/wait.h>
#include <unistd.h>

#include <cstdio>
#include <fstream>
#include <sstream>
#include <string>

#include <google/protobuf/util/json_util.h>
#include <gtest/gtest.h>

#include "io/model_file.h"
#include "io/recording.h"
#include "proto/summary.pb.h"
#include "src/core/scenario.h"
#include "tests/core/fit_test_util.h"

namespace fluxtrim {
namespace {

struct Result {
  int code = -1;
  std::string output;  // stdout and stderr
};

Result Exec(const std::string& args) {
  const std::string cmd = std::string(FLUXTRIM_EXE) + " " + args + " 2>&1";
  Result run;
  FILE* pipe = popen(cmd.c_str(), "r");
  if (!pipe) return run;
  char buffer[4096];
  while (fgets(buffer, sizeof buffer, pipe)) run.output += buffer;
  const int status = pclose(pipe);
  run.code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  return run;
}

std::string ReadFile(const std::string& path) {
  std::ifstream in(path);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

class FitCli : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    char dir[] = "/tmp/fluxtrim_fit_cli_XXXXXX";
    ASSERT_NE(mkdtemp(dir), nullptr);
    dir_ = new std::string(dir);
    const core::SimulatedFlight box = core::SimulateScenarioText(
        core::testing::AircraftBoxText({}), "box");
    io::WriteRecording(*dir_ + "/box.csv", box.recording);
    std::ofstream seg(*dir_ + "/segments.csv");
    seg << "start_s,end_s,heading_deg,kind\n";
    const char* kinds[] = {"", "pitch", "roll", "yaw"};
    for (const auto& s : box.segments) {
      if (s.kind >= 1 && s.kind <= 3) {
        seg.precision(10);
        seg << s.start_s << "," << s.end_s << "," << s.heading_deg << ","
            << kinds[s.kind] << "\n";
      }
    }
    const std::string line =
        "name: \"line\"\nseed: 3\ndate: \"2025-06-14\"\n"
        "start_lat_deg: -31.95 start_lon_deg: 141.45 start_alt_m: 2800\n"
        "platform { kind: AIRCRAFT permanent_nT { x: 5 } }\n"
        "sensors { scalar { } }\n"
        "survey_lines { line_count: 1 line_length_m: 30000 }\n";
    io::WriteRecording(*dir_ + "/line.csv",
                       core::SimulateScenarioText(line, "line").recording);
  }
  static void TearDownTestSuite() {
    const std::string cmd = "rm -rf " + *dir_;
    EXPECT_EQ(std::system(cmd.c_str()), 0);
    delete dir_;
  }
  static std::string* dir_;
};
std::string* FitCli::dir_ = nullptr;

TEST_F(FitCli, WritesModelSummaryAndJsonWithEveryRequiredKey) {
  const std::string model = *dir_ + "/box.ftmodel";
  const std::string json = *dir_ + "/box.json";
  const Result run = Exec("fit " + *dir_ + "/box.csv -o " + model +
                       " --summary-json " + json);
  ASSERT_EQ(run.code, 0) << run.output;
  // Terminal summary: table header, FOM, IR, condition number, lag, caution.
  for (const char* text : {"pitch", "roll", "yaw", "FOM", "improvement ratio",
                           "condition number", "lag", "Caution"}) {
    EXPECT_NE(run.output.find(text), std::string::npos) << text << "\n" << run.output;
  }
  // The caution appears once.
  EXPECT_EQ(run.output.find("Caution"), run.output.rfind("Caution"));
  const proto::CompensationModel m = io::ReadModelFile(model);
  EXPECT_EQ(m.coefficients_size(), 16);
  EXPECT_EQ(m.inputs().file(), *dir_ + "/box.csv");
  EXPECT_GT(m.quality().fom_before_nt(), 20 * m.quality().fom_after_nt());
  EXPECT_FALSE(m.tool_version().empty());
  EXPECT_TRUE(m.attitude().present());

  const std::string text = ReadFile(json);
  for (const char* key :
       {"\"samples\"", "\"sample_rate_hz\"", "\"terms\"", "\"coefficients\"",
        "\"name\"", "\"value\"", "\"std_error\"", "\"fom_before_nT\"",
        "\"fom_after_nT\"", "\"improvement_ratio\"", "\"band_rms_before_nT\"",
        "\"band_rms_after_nT\"", "\"condition_number\"", "\"lag_s\"",
        "\"maneuvers\"", "\"heading_deg\"", "\"kind\"", "\"start_s\"",
        "\"end_s\"", "\"pp_before_nT\"", "\"pp_after_nT\"",
        "\"cross_validation\"", "\"fom_nT\"", "\"warnings\""}) {
    EXPECT_NE(text.find(key), std::string::npos) << key;
  }
  proto::FitSummary summary;
  ASSERT_TRUE(google::protobuf::util::JsonStringToMessage(text, &summary).ok());
  EXPECT_EQ(summary.maneuvers_size(), 12);
  EXPECT_EQ(summary.cross_validation_size(), 4);
  EXPECT_EQ(summary.terms_size(), 16);
  EXPECT_NEAR(summary.fom_after_nt(), m.quality().fom_after_nt(), 1e-12);
}

TEST_F(FitCli, SegmentsFileReplacesDetection) {
  const Result run = Exec("fit " + *dir_ + "/box.csv -o " + *dir_ +
                       "/seg.ftmodel --segments " + *dir_ + "/segments.csv");
  ASSERT_EQ(run.code, 0) << run.output;
  const proto::CompensationModel m = io::ReadModelFile(*dir_ + "/seg.ftmodel");
  EXPECT_NE(m.inputs().maneuver_source().find("segments"), std::string::npos);
}

TEST_F(FitCli, OptionsReachTheModel) {
  const Result run = Exec("fit " + *dir_ + "/box.csv -o " + *dir_ +
                       "/opt.ftmodel --terms permanent,induced --ridge 1e-9 "
                       "--band 0.05,1.2 --order 3 --derivative-half-width 3 "
                       "--no-lag --no-cross-validation");
  ASSERT_EQ(run.code, 0) << run.output;
  const proto::CompensationModel m = io::ReadModelFile(*dir_ + "/opt.ftmodel");
  EXPECT_EQ(m.terms().set(), "permanent,induced");
  EXPECT_EQ(m.coefficients_size(), 8);
  EXPECT_EQ(m.filter().order(), 3);
  EXPECT_EQ(m.filter().low_hz(), 0.05);
  EXPECT_EQ(m.derivative_half_width(), 3);
  EXPECT_FALSE(m.lag_estimated());
  EXPECT_EQ(m.quality().ridge_method(), "fixed");
  EXPECT_EQ(m.quality().ridge_lambda(), 1e-9);
}

TEST_F(FitCli, UsageErrorsExitTwo) {
  const std::string base = "fit " + *dir_ + "/box.csv -o " + *dir_ + "/x.ftmodel ";
  EXPECT_EQ(Exec(base + "--terms magic").code, 2);
  EXPECT_EQ(Exec(base + "--ridge lots").code, 2);
  EXPECT_EQ(Exec(base + "--loss tukey").code, 2);
  EXPECT_EQ(Exec(base + "--band 0.9").code, 2);
  EXPECT_EQ(Exec(base + "--map f").code, 2);
  EXPECT_EQ(Exec("fit " + *dir_ + "/box.csv").code, 2);  // no -o
}

TEST_F(FitCli, BadInputAndUnfittableFlightsExitOne) {
  const Result missing = Exec("fit " + *dir_ + "/none.csv -o " + *dir_ + "/x.ftmodel");
  EXPECT_EQ(missing.code, 1) << missing.output;
  const Result line = Exec("fit " + *dir_ + "/line.csv -o " + *dir_ + "/line.ftmodel");
  EXPECT_EQ(line.code, 1) << line.output;
  EXPECT_NE(line.output.find("--segments"), std::string::npos) << line.output;
  std::ifstream written(*dir_ + "/line.ftmodel");
  EXPECT_FALSE(written.good());
  const Result aux = Exec("fit " + *dir_ + "/box.csv -o " + *dir_ + "/x.ftmodel --aux i_motor");
  EXPECT_EQ(aux.code, 1) << aux.output;
  EXPECT_NE(aux.output.find("i_motor"), std::string::npos) << aux.output;
}

}  // namespace
}  // namespace fluxtrim
