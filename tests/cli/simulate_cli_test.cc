// End-to-end: runs the real `fluxtrim simulate`. Every demo flight must
// regenerate bit for bit from its scenario (the `run` lines of
// flights/regenerate.sh), and the command must print its summary and
// cautions and map bad input to the documented exit codes.

#include <gtest/gtest.h>
#include <sys/stat.h>
#include <sys/wait.h>

#include <algorithm>
#include <cstdio>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "tests/support/subprocess.h"

namespace {

std::string Flights() { return std::string(FLUXTRIM_SOURCE_DIR) + "/flights/"; }

struct ProcessResult {
  int exit_code = -1;
  std::string out;
  std::string err;
};

std::string Slurp(const std::string& path, bool* ok = nullptr) {
  std::ifstream in(path, std::ios::binary);
  if (ok) *ok = static_cast<bool>(in);
  std::ostringstream text;
  text << in.rdbuf();
  return text.str();
}

std::string TempPath(const std::string& name) {
  return testing::TempDir() + "simulate_cli_" +
         testing::UnitTest::GetInstance()->current_test_info()->name() + "_" +
         name;
}

ProcessResult RunFluxtrim(const std::string& args) {
  const std::string err_path = TempPath("stderr");
  const fluxtrim::test_support::CommandResult r = fluxtrim::test_support::RunCommand(
      std::string("'") + FLUXTRIM_EXE + "' " + args + " 2>'" + err_path + "'");
  ProcessResult run;
  run.exit_code = r.code;
  run.out = r.output;
  run.err = Slurp(err_path);
  std::remove(err_path.c_str());
  return run;
}

void WriteFile(const std::string& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary);
  out << text;
}

// One `run SCENARIO -o REC --truth TRUTH` line of flights/regenerate.sh.
struct DemoRun {
  std::string scenario, output, truth;
};

std::vector<DemoRun> DemoRuns() {
  std::istringstream script(Slurp(Flights() + "regenerate.sh"));
  std::vector<DemoRun> runs;
  std::string line;
  while (std::getline(script, line)) {
    if (line.rfind("run ", 0) != 0) continue;
    std::istringstream words(line.substr(4));
    DemoRun run;
    std::string word;
    words >> run.scenario;
    while (words >> word) {
      if (word == "-o") words >> run.output;
      if (word == "--truth") words >> run.truth;
    }
    runs.push_back(run);
  }
  return runs;
}

std::string Stem(const std::string& path) {
  const std::size_t slash = path.find_last_of('/');
  const std::string name =
      slash == std::string::npos ? path : path.substr(slash + 1);
  return name.substr(0, name.find_last_of('.'));
}

void ExpectSameBytes(const std::string& committed, const std::string& made) {
  bool ok_a = false, ok_b = false;
  const std::string a = Slurp(committed, &ok_a);
  const std::string b = Slurp(made, &ok_b);
  ASSERT_TRUE(ok_a) << "missing committed file " << committed;
  ASSERT_TRUE(ok_b) << "simulate did not write " << made;
  ASSERT_EQ(a.size(), b.size()) << committed << " vs " << made;
  if (a != b) {
    std::size_t i = 0;
    while (a[i] == b[i]) ++i;
    const std::size_t line = 1 + std::count(a.begin(), a.begin() + i, '\n');
    FAIL() << committed << " differs from its regeneration at byte " << i
           << " (line " << line << ")";
  }
}

TEST(SimulateCliTest, EveryDemoFlightRegeneratesBitForBit) {
  const std::vector<DemoRun> runs = DemoRuns();
  // Box, lines, validation box, drone calibration, drone grid, vehicle loop.
  ASSERT_EQ(runs.size(), 6u);
  bool has_gdf2 = false;
  for (const DemoRun& run : runs) {
    SCOPED_TRACE(run.scenario);
    const std::string ext = run.output.substr(run.output.find_last_of('.'));
    const std::string out = TempPath(Stem(run.output) + ext);
    const std::string truth = TempPath(Stem(run.truth) + ".csv");
    const ProcessResult r =
        RunFluxtrim("simulate '" + Flights() + run.scenario + "' -o '" + out +
                    "' --truth '" + truth + "' --quiet");
    ASSERT_EQ(r.exit_code, 0) << r.err;
    EXPECT_TRUE(r.out.empty()) << "--quiet printed: " << r.out;
    if (ext == ".dfn") {
      has_gdf2 = true;
      const std::string stem = out.substr(0, out.size() - 4);
      const std::string committed =
          Flights() + run.output.substr(0, run.output.size() - 4);
      ExpectSameBytes(committed + ".dfn", stem + ".dfn");
      ExpectSameBytes(committed + ".dat", stem + ".dat");
      std::remove((stem + ".dfn").c_str());
      std::remove((stem + ".dat").c_str());
    } else {
      ExpectSameBytes(Flights() + run.output, out);
      std::remove(out.c_str());
    }
    ExpectSameBytes(Flights() + run.truth, truth);
    std::remove(truth.c_str());
  }
  EXPECT_TRUE(has_gdf2) << "at least one demo recording must be ASEG-GDF2";
}

TEST(SimulateCliTest, DemoFlightsStayWithinTenMegabytes) {
  std::size_t total = 0;
  for (const DemoRun& run : DemoRuns()) {
    std::vector<std::string> files = {run.output, run.truth};
    if (run.output.size() > 4 &&
        run.output.compare(run.output.size() - 4, 4, ".dfn") == 0) {
      files.push_back(run.output.substr(0, run.output.size() - 4) + ".dat");
    }
    for (const std::string& f : files) {
      struct stat st;
      ASSERT_EQ(stat((Flights() + f).c_str(), &st), 0) << f;
      total += static_cast<std::size_t>(st.st_size);
    }
  }
  EXPECT_LE(total, 10u * 1000u * 1000u);
}

TEST(SimulateCliTest, PrintsSummaryAndFlightCaution) {
  const std::string out = TempPath("box.csv");
  const ProcessResult r = RunFluxtrim("simulate '" + Flights() +
                                      "demo_box.scenario' -o '" + out + "'");
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_NE(r.out.find("samples: 5961 at 10 Hz"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("maneuvers: 12"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("pilot in command"), std::string::npos) << r.out;
  EXPECT_EQ(r.out.find("ordnance"), std::string::npos) << r.out;
  std::remove(out.c_str());
}

TEST(SimulateCliTest, SegmentsFileFeedsFit) {
  // The maneuver list the simulator flew, handed to `fit --segments`
  // instead of detection: the fit must accept it and use all 12.
  const std::string rec = TempPath("box.csv");
  const std::string segments = TempPath("segments.csv");
  const std::string model = TempPath("box.model");
  const ProcessResult sim =
      RunFluxtrim("simulate '" + Flights() + "demo_box.scenario' -o '" + rec +
                  "' --segments '" + segments + "' --quiet");
  ASSERT_EQ(sim.exit_code, 0) << sim.err;
  std::istringstream lines(Slurp(segments));
  std::string line;
  std::getline(lines, line);
  EXPECT_EQ(line, "start_s,end_s,heading_deg,kind");
  int count = 0;
  while (std::getline(lines, line)) ++count;
  EXPECT_EQ(count, 12);
  const ProcessResult fit = RunFluxtrim("fit '" + rec + "' -o '" + model +
                                        "' --segments '" + segments + "'");
  EXPECT_EQ(fit.exit_code, 0) << fit.out << fit.err;
  EXPECT_NE(fit.out.find("FOM"), std::string::npos) << fit.out;
  std::remove(rec.c_str());
  std::remove(segments.c_str());
  std::remove(model.c_str());
}

TEST(SimulateCliTest, GroundVehicleAlsoPrintsOrdnanceCaution) {
  const std::string out = TempPath("loop.ftrec");
  const ProcessResult r =
      RunFluxtrim("simulate '" + Flights() + "demo_vehicle_loop.scenario' -o '" +
                  out + "'");
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_NE(r.out.find("does not declare ground safe"), std::string::npos)
      << r.out;
  std::remove(out.c_str());
}

TEST(SimulateCliTest, SeedOptionReplacesTheScenarioSeed) {
  const std::string scenario = TempPath("small.scenario");
  WriteFile(scenario,
            "date: \"2025-06-14\" start_lat_deg: -32 start_lon_deg: 142\n"
            "start_alt_m: 2000 sensors { scalar { } }\n"
            "compensation_box { headings_deg: [0] cycles: 1 }\n");
  const ProcessResult a = RunFluxtrim("simulate '" + scenario + "' -o -");
  const ProcessResult b =
      RunFluxtrim("simulate '" + scenario + "' -o - --seed 99");
  const ProcessResult c =
      RunFluxtrim("simulate '" + scenario + "' -o - --seed 99");
  ASSERT_EQ(a.exit_code, 0) << a.err;
  ASSERT_EQ(b.exit_code, 0) << b.err;
  EXPECT_NE(a.out, b.out);
  EXPECT_EQ(b.out, c.out);
  // CSV on stdout; the summary went to stderr.
  EXPECT_NE(a.out.find("time,bx,by,bz,f,roll,pitch,heading,lat,lon,alt"),
            std::string::npos);
  EXPECT_NE(b.err.find("seed 99"), std::string::npos) << b.err;
  std::remove(scenario.c_str());
}

TEST(SimulateCliTest, BadScenarioExitsOneNamingFileLineAndColumn) {
  const std::string scenario = TempPath("bad.scenario");
  WriteFile(scenario,
            "date: \"2025-06-14\"\nstart_lat_deg: -32\n"
            "start_lon_deg: 142\n  sample_rate_hz: -5\n"
            "compensation_box { }\n");
  const ProcessResult r =
      RunFluxtrim("simulate '" + scenario + "' -o '" + TempPath("x.csv") + "'");
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_NE(r.err.find(scenario + ":4:3:"), std::string::npos) << r.err;
  EXPECT_NE(r.err.find("sample_rate_hz"), std::string::npos) << r.err;
  std::remove(scenario.c_str());
}

TEST(SimulateCliTest, MissingScenarioFileExitsOne) {
  const ProcessResult r = RunFluxtrim("simulate '" + TempPath("nowhere") +
                                      ".scenario' -o '" + TempPath("x.csv") +
                                      "'");
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_NE(r.err.find("cannot open"), std::string::npos) << r.err;
}

TEST(SimulateCliTest, UsageErrorsExitTwo) {
  EXPECT_EQ(RunFluxtrim("simulate '" + Flights() + "demo_box.scenario'")
                .exit_code,
            2);
  const ProcessResult r = RunFluxtrim("simulate '" + Flights() +
                                      "demo_box.scenario' -o out.xlsx");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.err.find("xlsx"), std::string::npos) << r.err;
  EXPECT_EQ(RunFluxtrim("simulate '" + Flights() +
                        "demo_box.scenario' -o '" + TempPath("y.csv") +
                        "' --seed notanumber")
                .exit_code,
            2);
}

}  // namespace
