// inspect's maneuver report and excitation check (src/core/inspect.h,
// src/core/excitation.h) on the demo compensation box, simulated here from
// flights/demo_box.scenario so the true maneuvers are known, and on the demo
// vehicle loop; plus the CLI's --json keys.

#include "src/core/inspect.h"

#include <gtest/gtest.h>
#include <sys/wait.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "io/recording.h"
#include "src/core/excitation.h"
#include "src/core/scenario.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::core {
namespace {

const std::string kSource = FLUXTRIM_SOURCE_DIR;

std::string ReadFile(const std::string& path) {
  std::ifstream in(path);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

double AngleDistanceDeg(double a, double b) {
  double d = std::fmod(std::fabs(a - b), 360.0);
  return d > 180 ? 360 - d : d;
}

// The demo box simulated from its scenario file (4 headings 0/90/180/270,
// pitch, roll, yaw at each: flights/demo_box.scenario), once per process.
const SimulatedFlight& DemoBox() {
  static const SimulatedFlight* box = new SimulatedFlight(SimulateScenarioText(
      ReadFile(kSource + "/flights/demo_box.scenario"), "demo_box.scenario"));
  return *box;
}

io::Table ReadDemo(const std::string& name) {
  io::ReadOptions read;
  read.time_order = io::TimeOrderPolicy::kAccept;
  return io::ReadRecording(kSource + "/flights/" + name, read);
}

// Segment edges: the detector trims to the half-power point of a steady
// oscillation (maneuvers.h); a fraction of the 6 s period plus the
// simulator's ramps. 3 s is half a period (tests/core/maneuvers_test.cc
// holds the detector itself to 2 s on clean boxes).
constexpr double kEdgeTolS = 3.0;
// Leg headings: the cluster mean of a leg flown with 0.1 deg RMS heading
// turbulence and +-5 deg yaw (scenario); 2 deg, far below the 90 deg
// spacing.
constexpr double kHeadingTolDeg = 2.0;

TEST(Inspect, ReportsTheTwelveManeuversOfTheBoxWithTheirKindsAndHeadings) {
  const SimulatedFlight& box = DemoBox();
  const proto::InspectSummary s = Inspect(box.recording, "demo_box");
  EXPECT_EQ(s.maneuver_source(), "attitude");
  std::vector<const SegmentTruth*> truth;
  for (const SegmentTruth& t : box.segments) {
    if (t.kind >= 1 && t.kind <= 3) truth.push_back(&t);
  }
  ASSERT_EQ(truth.size(), 12u) << "the scenario flies 12 maneuvers";
  ASSERT_EQ(s.maneuvers_size(), 12);
  const char* kinds[] = {"", "pitch", "roll", "yaw"};
  for (int i = 0; i < 12; ++i) {
    const proto::DetectedManeuver& m = s.maneuvers(i);
    const SegmentTruth& t = *truth[static_cast<std::size_t>(i)];
    SCOPED_TRACE("maneuver " + std::to_string(i));
    EXPECT_EQ(m.kind(), kinds[t.kind]);
    EXPECT_LE(AngleDistanceDeg(m.heading_deg(), t.heading_deg), kHeadingTolDeg);
    EXPECT_NEAR(m.start_s(), t.start_s, kEdgeTolS);
    EXPECT_NEAR(m.end_s(), t.end_s, kEdgeTolS);
  }
  // The text report shows them.
  const std::string text = FormatInspectSummary(s);
  EXPECT_NE(text.find("Maneuvers (12, from attitude)"), std::string::npos)
      << text;
}

TEST(Inspect, ExcitationListsEveryTermGroupWithOneSingularValuePerColumn) {
  const proto::InspectSummary s = Inspect(DemoBox().recording, "demo_box");
  ASSERT_EQ(s.excitation_size(), 3);
  // Group sizes of the default 16-term set (models/tolles_lawson.h).
  const std::vector<std::pair<std::string, int>> groups = {
      {"permanent", 3}, {"induced", 5}, {"eddy", 8}};
  for (std::size_t g = 0; g < groups.size(); ++g) {
    const proto::GroupExcitation& e = s.excitation(static_cast<int>(g));
    EXPECT_EQ(e.group(), groups[g].first);
    EXPECT_EQ(e.singular_values_size(), groups[g].second);
    EXPECT_EQ(e.terms_size(), groups[g].second);
    for (int i = 1; i < e.singular_values_size(); ++i) {
      EXPECT_LE(e.singular_values(i), e.singular_values(i - 1)) << "descending";
    }
    EXPECT_GT(e.singular_values(e.singular_values_size() - 1), 0.0);
    // A full box determines every default term (fit.h: the fit recovers
    // the simulated truth from it, tests/core/fit_test.cc).
    EXPECT_EQ(e.undetermined_terms_size(), 0) << e.group();
  }
  const std::string text = FormatInspectSummary(s);
  EXPECT_NE(text.find("every term is determined"), std::string::npos) << text;
}

// Frobenius identity: the squared singular values of a matrix sum to the
// sum of its squared entries (Golub & Van Loan, Matrix Computations, 4th
// ed., eq. 2.4.6 / Cor. 2.4.3); here per group, in RMS form, so they sum to
// the squared band RMS of the group's columns. Both come from different
// code paths (SVD of the QR factor vs column norms). Relative tolerance
// 1e-10: a Jacobi SVD and a Householder QR of a 16-column matrix lose a few
// hundred ulps at most.
TEST(Inspect, SingularValuesOfEachGroupCarryTheEnergyOfItsColumns) {
  const ExcitationSummary ex = AnalyseExcitation(DemoBox().recording);
  ASSERT_TRUE(ex.usable) << ex.message;
  constexpr double kRelTol = 1e-10;
  for (const GroupExcitation& g : ex.groups) {
    double sv2 = 0, col2 = 0;
    for (double v : g.singular_values) sv2 += v * v;
    for (const TermExcitation& t : ex.terms) {
      if (t.group == g.group) col2 += t.band_rms * t.band_rms;
    }
    EXPECT_NEAR(sv2, col2, kRelTol * col2) << g.group;
  }
}

// The 18-term set is rank-deficient by two: sum c_i^2 = 1 makes ind_zz a
// combination of ind_xx, ind_yy and a constant, sum c_i c'_i = 0 makes
// eddy_zz one of eddy_xx and eddy_yy (Tolles & Lawson 1950; Leliak 1961).
// The check must name exactly these two.
TEST(Inspect, FullTermSetNamesTheTwoTermsTheIdentitiesMakeRedundant) {
  InspectOptions options;
  options.excitation.terms = models::ParseTermSet("full");
  const proto::InspectSummary s =
      Inspect(DemoBox().recording, "demo_box", options);
  std::set<std::string> undetermined;
  for (const proto::GroupExcitation& g : s.excitation()) {
    for (const std::string& t : g.undetermined_terms()) undetermined.insert(t);
  }
  EXPECT_EQ(undetermined, (std::set<std::string>{"ind_zz", "eddy_zz"}));
  ASSERT_EQ(s.excitation_size(), 3);
  EXPECT_EQ(s.excitation(1).singular_values_size(), 6);
  EXPECT_EQ(s.excitation(2).singular_values_size(), 9);
  EXPECT_EQ(s.term_set(), "full");
}

// A ground vehicle drives level: c_z barely changes (perm_z gets no
// band-pass energy) and without pitch and roll maneuvers the eddy terms are
// not excited enough above the residual (flights/demo_vehicle_loop.scenario
// has no box). The check must name the undetermined terms with a reason,
// perm_z among them, and warn.
TEST(Inspect, VehicleLoopNamesTheTermsItCannotDetermine) {
  const proto::InspectSummary s =
      Inspect(ReadDemo("demo_vehicle_loop.csv"), "demo_vehicle_loop.csv");
  ASSERT_GT(s.excitation_size(), 0) << s.excitation_note();
  std::set<std::string> undetermined;
  for (const proto::GroupExcitation& g : s.excitation()) {
    for (const std::string& t : g.undetermined_terms()) undetermined.insert(t);
    for (const proto::TermExcitation& t : g.terms()) {
      if (!t.determined()) {
        EXPECT_FALSE(t.reason().empty()) << t.name();
        EXPECT_TRUE(std::isnan(t.std_error())) << t.name();
      } else {
        EXPECT_LE(t.std_error(), 0.01 * t.plausible_bound()) << t.name();
      }
    }
  }
  EXPECT_EQ(undetermined.count("perm_z"), 1u);
  EXPECT_LT(undetermined.size(), 16u) << "the loop still determines some terms";
  bool warned = false;
  for (const std::string& w : s.warnings()) {
    warned = warned ||
             w.find("not determined by this recording") != std::string::npos;
  }
  EXPECT_TRUE(warned);
  const std::string text = FormatInspectSummary(s);
  EXPECT_NE(text.find("NOT DETERMINED"), std::string::npos) << text;
}

TEST(Inspect, RecordingWithoutFluxgateSkipsManeuversAndExcitation) {
  io::Table table;
  std::vector<double> t, f;
  for (int i = 0; i < 200; ++i) {
    t.push_back(0.1 * i);
    f.push_back(50000.0 + std::sin(0.3 * i));
  }
  table.AddChannel({"time", "s", ""}).values = t;
  table.AddChannel({"f", "nT", ""}).values = f;
  table.set_time_channel("time");
  const proto::InspectSummary s = Inspect(table, "scalar_only");
  EXPECT_EQ(s.maneuvers_size(), 0);
  EXPECT_EQ(s.excitation_size(), 0);
  EXPECT_EQ(s.samples(), 200u);
}

TEST(Inspect, ShortRecordingExplainsWhyTheExcitationCheckWasSkipped) {
  // 30 s at 10 Hz: the fit needs five periods of the 0.1 Hz band edge
  // (50 s) after the 5 s edge trims (fit.h).
  io::Table table = DemoBox().recording;
  table.Slice(0, 300);
  const proto::InspectSummary s = Inspect(table, "short");
  EXPECT_EQ(s.excitation_size(), 0);
  EXPECT_NE(s.excitation_note().find("skipped"), std::string::npos);
}

TEST(Inspect, LongRecordingIsNotHeldInMemoryForTheExcitationCheck) {
  InspectOptions options;
  options.excitation.max_samples = 1000;  // the demo box has 5961
  const proto::InspectSummary s =
      Inspect(DemoBox().recording, "demo_box", options);
  EXPECT_EQ(s.excitation_size(), 0);
  EXPECT_NE(s.excitation_note().find("cut out the compensation flight"),
            std::string::npos)
      << s.excitation_note();
  EXPECT_EQ(s.maneuvers_size(), 12) << "maneuvers are still reported";
}

// ---- command line -------------------------------------------------------

using Result = test_support::CommandResult;  // code, output (stdout + stderr)

Result Exec(const std::string& args) {
  return test_support::RunFluxtrimMerged(args);
}

TEST(InspectCli, JsonHoldsManeuversAndExcitation) {
  const char* tmp = std::getenv("TEST_TMPDIR");
  const std::string json =
      std::string(tmp ? tmp : "/tmp") + "/inspect_box.json";
  const Result run =
      Exec("inspect " + kSource + "/flights/demo_box.csv --json " + json);
  ASSERT_EQ(run.code, 0) << run.output;
  EXPECT_NE(run.output.find("Excitation"), std::string::npos) << run.output;
  const std::string text = ReadFile(json);
  for (const char* key :
       {"\"maneuvers\"", "\"maneuver_source\"", "\"heading_deg\"", "\"kind\"",
        "\"start_s\"", "\"end_s\"", "\"excitation\"", "\"group\"",
        "\"singular_values\"", "\"undetermined_terms\"", "\"column_unit\"",
        "\"std_error\"", "\"excitation_residual_nT\"", "\"term_set\""}) {
    EXPECT_NE(text.find(key), std::string::npos) << key << "\n" << text;
  }
}

TEST(InspectCli, TermAndAuxOptionsAreChecked) {
  const std::string rec = kSource + "/flights/demo_vehicle_loop.csv";
  EXPECT_EQ(Exec("inspect " + rec + " --terms bogus").code, 2);
  EXPECT_EQ(Exec("inspect " + rec + " --aux no_such_channel").code, 2);
  EXPECT_EQ(Exec("inspect " + rec + " --band 0.9,0.1").code, 2);
  const Result run = Exec("inspect " + rec + " --aux i_alternator");
  ASSERT_EQ(run.code, 0) << run.output;
  EXPECT_NE(run.output.find("aux_i_alternator"), std::string::npos)
      << run.output;
}

}  // namespace
}  // namespace fluxtrim::core
