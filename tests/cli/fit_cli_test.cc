// End to end: the built `fluxtrim fit` on simulated recordings written to
// disk.
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include <google/protobuf/util/json_util.h>
#include <gtest/gtest.h>

#include "io/model_file.h"
#include "io/recording.h"
#include "proto/summary.pb.h"
#include "src/core/scenario.h"
#include "tests/core/fit_test_util.h"
#include "tests/support/subprocess.h"

namespace fluxtrim {
namespace {

using Result = test_support::CommandResult;  // code, output (stdout + stderr)

Result Exec(const std::string& args) {
  return test_support::RunFluxtrimMerged(args);
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


// --- Sensor calibration in the fit (issue 6, "Using it") -------------------

// Column `name` of a CSV written by fluxtrim (lines starting with '#' are
// comments; the first other line is the header).
std::vector<double> CsvColumn(const std::string& path, const std::string& name) {
  std::ifstream in(path);
  std::string line;
  int col = -1;
  std::vector<double> values;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    std::vector<std::string> cells;
    std::stringstream cells_in(line);
    std::string cell;
    while (std::getline(cells_in, cell, ',')) cells.push_back(cell);
    if (col < 0) {
      for (std::size_t i = 0; i < cells.size(); ++i) {
        if (cells[i] == name) col = static_cast<int>(i);
      }
      if (col < 0) return values;
      continue;
    }
    const std::size_t c = static_cast<std::size_t>(col);
    values.push_back(c < cells.size() && !cells[c].empty()
                         ? std::strtod(cells[c].c_str(), nullptr)
                         : std::nan(""));
  }
  return values;
}

// The drone integrator's path on the demo data (flights/README.md):
// calibrate the fluxgate on the rotation flight (no scalar sensor, WMM2025
// reference, motor current as aux), fit the compensation on the calibrated
// fluxgate magnitude with the rotations as segments, apply to the survey
// grid. The rotation flight has no pitch/roll/yaw maneuvers, so `fit`
// without --segments refuses and points at calibrate and --segments.
TEST_F(FitCli, FluxgateOnlyDroneIsCalibratedFittedAndAppliedWithTheSensor) {
  const std::string flights = std::string(FLUXTRIM_SOURCE_DIR) + "/flights/";
  const std::string sensor = *dir_ + "/drone.sensor";
  const Result cal = Exec("calibrate " + flights + "demo_drone_cal.csv -o " +
                          sensor + " --date 2025-06-16 --aux i_motor");
  ASSERT_EQ(cal.code, 0) << cal.output;

  const std::string model = *dir_ + "/drone.ftmodel";
  const Result refused = Exec("fit " + flights + "demo_drone_cal.csv -o " +
                              model + " --sensor " + sensor + " --aux i_motor");
  EXPECT_EQ(refused.code, 1) << refused.output;
  EXPECT_NE(refused.output.find("calibrate"), std::string::npos) << refused.output;
  EXPECT_NE(refused.output.find("--segments"), std::string::npos) << refused.output;

  // Rotation times from the simulator's truth (maneuver_kind 4), given as
  // yaw segments: a full turn is a yaw maneuver.
  const std::string truth = flights + "truth/demo_drone_cal_truth.csv";
  const std::vector<double> t = CsvColumn(truth, "time");
  const std::vector<double> kind = CsvColumn(truth, "maneuver_kind");
  ASSERT_EQ(t.size(), kind.size());
  ASSERT_FALSE(t.empty());
  const std::string segments = *dir_ + "/rotations.csv";
  {
    std::ofstream seg(segments);
    seg.precision(10);
    seg << "start_s,end_s,heading_deg,kind\n";
    for (std::size_t i = 0; i < t.size();) {
      if (kind[i] != 4) {
        ++i;
        continue;
      }
      std::size_t j = i;
      while (j + 1 < t.size() && kind[j + 1] == 4) ++j;
      seg << t[i] << "," << t[j] << ",0,yaw\n";
      i = j + 1;
    }
  }
  const std::string json = *dir_ + "/drone_fit.json";
  const Result without = Exec("fit " + flights + "demo_drone_cal.csv -o " +
                              *dir_ + "/drone_noaux.ftmodel --sensor " + sensor +
                              " --segments " + segments);
  ASSERT_EQ(without.code, 0) << without.output;
  const Result fit = Exec("fit " + flights + "demo_drone_cal.csv -o " + model +
                          " --sensor " + sensor + " --aux i_motor --segments " +
                          segments + " --summary-json " + json);
  ASSERT_EQ(fit.code, 0) << fit.output;
  EXPECT_NE(fit.output.find("field from |B|"), std::string::npos) << fit.output;
  const proto::CompensationModel m = io::ReadModelFile(model);
  ASSERT_TRUE(m.has_sensor());
  EXPECT_EQ(m.inputs().field_source(), "|B|");
  const proto::CompensationModel m0 = io::ReadModelFile(*dir_ + "/drone_noaux.ftmodel");
  // On this flight (fluxgate noise 0.2 nT) the current term takes the FOM
  // from about 10 nT to 2.5 nT; at least 3x (our choice, below the measured
  // 4.1x; the 5x acceptance is in tests/core/joint_fit_test.cc).
  EXPECT_GT(m0.quality().fom_after_nt(), 3.0 * m.quality().fom_after_nt());
  const std::string j = ReadFile(json);
  EXPECT_NE(j.find("\"sensor_source\": \"file\""), std::string::npos) << j;
  EXPECT_NE(j.find("\"sensor\": {"), std::string::npos) << j;
  google::protobuf::util::JsonParseOptions po;
  po.ignore_unknown_fields = true;
  proto::FitSummary parsed;
  EXPECT_TRUE(google::protobuf::util::JsonStringToMessage(j, &parsed, po).ok());

  // Apply to the survey grid (ASEG-GDF2) and compare with the simulator's
  // ambient field: the compensated fluxgate magnitude holds the ambient
  // field plus the fluxgate noise (0.2 nT per axis); 1.5x that noise as in
  // the calibrate acceptance of issue 6. A constant offset (hard iron left
  // in the WMM-referenced calibration) is removed first.
  const std::string out = *dir_ + "/grid_out.csv";
  const Result apply = Exec("apply " + model + " " + flights +
                            "demo_drone_grid.dfn -o " + out);
  ASSERT_EQ(apply.code, 0) << apply.output;
  const std::vector<double> f_comp = CsvColumn(out, "f_comp");
  const std::vector<double> ambient =
      CsvColumn(flights + "truth/demo_drone_grid_truth.csv", "f_ambient");
  ASSERT_EQ(f_comp.size(), ambient.size());
  double sum = 0, sum2 = 0;
  std::size_t n = 0;
  for (std::size_t i = 0; i < f_comp.size(); ++i) {
    if (!std::isfinite(f_comp[i])) continue;
    const double d = f_comp[i] - ambient[i];
    sum += d;
    sum2 += d * d;
    ++n;
  }
  ASSERT_GT(n, f_comp.size() / 2);
  const double mean = sum / static_cast<double>(n);
  const double sd = std::sqrt(sum2 / static_cast<double>(n) - mean * mean);
  EXPECT_LT(sd, 1.5 * 0.2) << "f_comp - f_ambient standard deviation";
}

TEST_F(FitCli, JointSensorFitNeedsAScalarSensorAndWritesTheCalibration) {
  const std::string flights = std::string(FLUXTRIM_SOURCE_DIR) + "/flights/";
  const Result drone = Exec("fit " + flights + "demo_drone_cal.csv -o " +
                            *dir_ + "/j.ftmodel --joint-sensor");
  EXPECT_EQ(drone.code, 1) << drone.output;
  EXPECT_NE(drone.output.find("scalar sensor"), std::string::npos) << drone.output;
  EXPECT_EQ(Exec("fit " + *dir_ + "/box.csv -o " + *dir_ +
                 "/j.ftmodel --joint-sensor --sensor x.sensor")
                .code,
            2);

  // The demo box's fluxgate has gains 1.0008/0.9993/1.0004 and offsets
  // 3.2/-2.1/1.4 nT (flights/demo_box.scenario).
  const std::string model = *dir_ + "/joint.ftmodel";
  const std::string sensor = *dir_ + "/joint.sensor";
  const Result joint = Exec("fit " + flights + "demo_box.csv -o " + model +
                            " --joint-sensor --sensor-output " + sensor);
  ASSERT_EQ(joint.code, 0) << joint.output;
  EXPECT_NE(joint.output.find("joint sensor calibration"), std::string::npos);
  const proto::CompensationModel m = io::ReadModelFile(model);
  ASSERT_TRUE(m.has_sensor());
  EXPECT_EQ(m.sensor().mode(), "joint");
  // 5e-5: a tenth of the 0.05 % gain tolerance (our choice; the
  // level box turns the field through x and y far more than through z).
  EXPECT_NEAR(m.sensor().gains().x(), 1.0008, 5e-5);
  EXPECT_NEAR(m.sensor().gains().y(), 0.9993, 5e-5);
  EXPECT_NEAR(m.sensor().gains().z(), 1.0004, 5e-5);
  // Offsets within 1 nT (issue 6's calibration acceptance).
  EXPECT_NEAR(m.sensor().offsets_nt().x(), 3.2, 1.0);
  EXPECT_NEAR(m.sensor().offsets_nt().y(), -2.1, 1.0);
  EXPECT_NEAR(m.sensor().offsets_nt().z(), 1.4, 1.0);
  std::ifstream written(sensor);
  EXPECT_TRUE(written.good());
}

}  // namespace
}  // namespace fluxtrim
