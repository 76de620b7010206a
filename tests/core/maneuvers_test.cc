// Maneuver detection on synthetic compensation boxes generated here: the
// true segment times, kinds and headings are known by construction. The box
// follows common practice (4 headings; pitch +-5 deg, roll +-10 deg, yaw
// +-5 deg; periods 4-8 s; 30 s each; level settles between).

#include "src/core/maneuvers.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <random>
#include <stdexcept>
#include <string>
#include <vector>

#include "io/error.h"

namespace fluxtrim::core {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kDeg = kPi / 180;

// Boundaries: the trimming puts a steady oscillation's edge at the
// half-power point of its windowed mean square, exact for an abrupt start;
// the running-mean de-meaning and sine ripple move it by a fraction of a
// period. 2 s is a third of a typical 6 s period.
constexpr double kBoundaryTolS = 2.0;
// Headings: the cluster mean of a leg whose yaw swings +-5 deg and whose
// attitude noise is 0.2 deg; 2 deg is ample and far below the 90 deg
// spacing of legs.
constexpr double kHeadingTolDeg = 2.0;

struct Truth {
  ManeuverKind kind;
  double heading_deg;
  double start_s;
  double end_s;
};

struct Flight {
  std::vector<double> t, roll, pitch, heading;  // deg
  std::vector<Truth> truth;
};

double Wrap(double deg) {
  double w = std::fmod(deg, 360.0);
  return w < 0 ? w + 360.0 : w;
}

double AngleDistance(double a, double b) {
  double d = std::fmod(std::abs(a - b), 360.0);
  return d > 180 ? 360 - d : d;
}

// How the pilot flies the maneuvers.
struct Style {
  double ramp_periods = 0;  // amplitude builds up / dies down over this
  double coupling = 0;      // roll <-> yaw cross-coupling (adverse yaw)
};

// A box of pitch, roll and yaw at each heading, 90 deg turns between legs.
Flight MakeBox(const std::vector<double>& legs_deg, double rate_hz,
               unsigned seed, bool maneuvers = true, Style style = {}) {
  Flight f;
  std::mt19937 rng(seed);
  std::normal_distribution<double> turbulence(0.0, 0.2);  // deg
  const double dt = 1.0 / rate_hz;
  double now = 0;
  double heading = legs_deg.front();
  auto emit = [&](double roll, double pitch, double hdg) {
    f.t.push_back(now);
    f.roll.push_back(roll + turbulence(rng));
    f.pitch.push_back(pitch + turbulence(rng));
    f.heading.push_back(Wrap(hdg + turbulence(rng)));
    now += dt;
  };
  auto level = [&](double seconds) {
    const double end = now + seconds;
    while (now < end - 1e-9) emit(0, 0, heading);
  };
  auto maneuver = [&](ManeuverKind kind, double amplitude_deg, double period_s,
                      int cycles) {
    const double start = now;
    const double end = now + period_s * cycles;
    const double ramp_s = style.ramp_periods * period_s;
    while (now < end - 1e-9) {
      const double tau = now - start;
      const double envelope =
          ramp_s > 0 ? std::min({1.0, tau / ramp_s, (end - now) / ramp_s})
                     : 1.0;
      const double a =
          envelope * amplitude_deg * std::sin(2 * kPi * tau / period_s);
      const double roll = kind == ManeuverKind::kRoll  ? a
                          : kind == ManeuverKind::kYaw ? style.coupling * a
                                                       : 0;
      const double yaw = kind == ManeuverKind::kYaw    ? a
                         : kind == ManeuverKind::kRoll ? -style.coupling * a
                                                       : 0;
      emit(roll, kind == ManeuverKind::kPitch ? a : 0, heading + yaw);
    }
    f.truth.push_back({kind, Wrap(heading), start, end});
  };
  auto turn = [&](double to_deg) {
    // Coordinated turn: bank 25 deg, rolled in and out over 3 s, heading
    // rate 3 deg/s at full bank; slight nose-up.
    double change = std::fmod(to_deg - heading + 540.0, 360.0) - 180.0;
    const double sign = change >= 0 ? 1 : -1;
    const double duration = std::abs(change) / 3.0 + 3.0;
    const double start = now;
    while (now < start + duration - 1e-9) {
      const double tau = now - start;
      const double bank =
          25.0 * std::min({1.0, tau / 3.0, (duration - tau) / 3.0});
      emit(sign * bank, 2.0 * bank / 25.0, heading);
      heading += sign * 3.0 * bank / 25.0 * dt;
    }
    heading = to_deg;
  };
  level(30);
  for (std::size_t leg = 0; leg < legs_deg.size(); ++leg) {
    if (leg > 0) turn(legs_deg[leg]);
    level(15);
    if (maneuvers) {
      maneuver(ManeuverKind::kPitch, 5, 6, 5);
      level(15);
      maneuver(ManeuverKind::kRoll, 10, 8, 4);
      level(15);
      maneuver(ManeuverKind::kYaw, 5, 5, 6);
    } else {
      level(120);
    }
    level(15);
  }
  return f;
}

io::Table AttitudeTable(const Flight& f) {
  io::Table table({{"time", "s", ""},
                   {"roll", "deg", ""},
                   {"pitch", "deg", ""},
                   {"heading", "deg", ""}});
  table.Column("time") = f.t;
  table.Column("roll") = f.roll;
  table.Column("pitch") = f.pitch;
  table.Column("heading") = f.heading;
  return table;
}

// Body-frame fluxgate field of a level-referenced earth field (nT, north,
// east, down) rotated by heading, pitch, roll (3-2-1), plus a small fixed
// platform field and sensor noise. No attitude channels.
io::Table FluxgateTable(const Flight& f, double north_nT, double down_nT,
                        unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, 0.5);  // nT
  io::Table table({{"time", "s", ""},
                   {"bx", "nT", ""},
                   {"by", "nT", ""},
                   {"bz", "nT", ""}});
  table.Column("time") = f.t;
  auto& bx = table.Column("bx");
  auto& by = table.Column("by");
  auto& bz = table.Column("bz");
  bx.assign(f.t.size(), 0.0);
  by.assign(f.t.size(), 0.0);
  bz.assign(f.t.size(), 0.0);
  for (std::size_t i = 0; i < f.t.size(); ++i) {
    const double psi = f.heading[i] * kDeg, th = f.pitch[i] * kDeg,
                 ph = f.roll[i] * kDeg;
    // R3(psi): north/east/down -> heading frame.
    double x = std::cos(psi) * north_nT, y = -std::sin(psi) * north_nT,
           z = down_nT;
    // R2(theta): pitch about y.
    const double x2 = std::cos(th) * x - std::sin(th) * z;
    const double z2 = std::sin(th) * x + std::cos(th) * z;
    // R1(phi): roll about x.
    const double y3 = std::cos(ph) * y + std::sin(ph) * z2;
    const double z3 = -std::sin(ph) * y + std::cos(ph) * z2;
    bx[i] = x2 + 40 + noise(rng);
    by[i] = y3 - 25 + noise(rng);
    bz[i] = z3 + 60 + noise(rng);
  }
  return table;
}

void ExpectMatchesTruth(const ManeuverDetection& found,
                        const std::vector<Truth>& truth) {
  ASSERT_EQ(found.maneuvers.size(), truth.size());
  for (std::size_t i = 0; i < truth.size(); ++i) {
    const Maneuver& m = found.maneuvers[i];
    const Truth& t = truth[i];
    EXPECT_EQ(m.kind, t.kind)
        << "maneuver " << i << " found " << ManeuverKindName(m.kind)
        << " expected " << ManeuverKindName(t.kind);
    EXPECT_LE(AngleDistance(m.heading_deg, t.heading_deg), kHeadingTolDeg)
        << "maneuver " << i << " heading " << m.heading_deg;
    EXPECT_GE(m.heading_deg, 0.0);
    EXPECT_LT(m.heading_deg, 360.0);
    EXPECT_NEAR(m.start_s, t.start_s, kBoundaryTolS) << "maneuver " << i;
    EXPECT_NEAR(m.end_s, t.end_s, kBoundaryTolS) << "maneuver " << i;
  }
}

TEST(DetectManeuvers, FindsAllTwelveManeuversOfABoxFromAttitude) {
  const Flight f = MakeBox({0, 90, 180, 270}, 10.0, 1);
  const ManeuverDetection found = DetectManeuvers(AttitudeTable(f));
  EXPECT_EQ(found.source, "attitude");
  ExpectMatchesTruth(found, f.truth);
  ASSERT_FALSE(found.notes.empty());
  EXPECT_NE(found.notes.front().find("12 maneuvers at 4 headings"),
            std::string::npos)
      << found.notes.front();
}

TEST(DetectManeuvers, FindsSurveyLineBoxAt20HzWithItsHeadings) {
  const Flight f = MakeBox({35, 125, 215, 305}, 20.0, 2);
  ExpectMatchesTruth(DetectManeuvers(AttitudeTable(f)), f.truth);
}

TEST(DetectManeuvers, FindsBoxOfAPilotWhoRampsAndCouplesTheMotion) {
  // Amplitude builds up over the first period and dies down over the last;
  // roll brings 30 % adverse yaw and yaw 30 % roll. Where such a maneuver
  // starts is defined only to within the ramp, so the boundary tolerance is
  // one period of the slowest maneuver (8 s) here.
  constexpr double kRampBoundaryTolS = 8.0;
  Style style;
  style.ramp_periods = 1;
  style.coupling = 0.3;
  const Flight f = MakeBox({10, 100, 190, 280}, 10.0, 9, true, style);
  const ManeuverDetection found = DetectManeuvers(AttitudeTable(f));
  ASSERT_EQ(found.maneuvers.size(), f.truth.size());
  for (std::size_t i = 0; i < f.truth.size(); ++i) {
    EXPECT_EQ(found.maneuvers[i].kind, f.truth[i].kind) << i;
    EXPECT_LE(
        AngleDistance(found.maneuvers[i].heading_deg, f.truth[i].heading_deg),
        kHeadingTolDeg);
    EXPECT_NEAR(found.maneuvers[i].start_s, f.truth[i].start_s,
                kRampBoundaryTolS);
    EXPECT_NEAR(found.maneuvers[i].end_s, f.truth[i].end_s, kRampBoundaryTolS);
    // Inside the flown span, never outside it by more than rounding.
    EXPECT_GE(found.maneuvers[i].start_s, f.truth[i].start_s - 0.5) << i;
    EXPECT_LE(found.maneuvers[i].end_s, f.truth[i].end_s + 0.5) << i;
  }
}

TEST(DetectManeuvers, LevelFlightWithTurnsHasNoManeuvers) {
  const Flight f = MakeBox({0, 90, 180, 270}, 10.0, 3, /*maneuvers=*/false);
  const ManeuverDetection found = DetectManeuvers(AttitudeTable(f));
  EXPECT_TRUE(found.maneuvers.empty());
  ASSERT_FALSE(found.notes.empty());
  EXPECT_NE(found.notes.front().find("no maneuvers"), std::string::npos);
}

TEST(DetectManeuvers, GapsInTheRecordingDoNotBreakDetection) {
  Flight f = MakeBox({0, 90, 180, 270}, 10.0, 4);
  // A 5 s dropout of all rows in a level stretch before the second leg's
  // pitch and one NaN attitude sample in the middle of a roll.
  const double drop_from = f.truth[3].start_s - 12, drop_to = drop_from + 5;
  Flight g;
  g.truth = f.truth;
  for (std::size_t i = 0; i < f.t.size(); ++i) {
    if (f.t[i] >= drop_from && f.t[i] < drop_to) continue;
    g.t.push_back(f.t[i]);
    g.roll.push_back(f.roll[i]);
    g.pitch.push_back(f.pitch[i]);
    g.heading.push_back(f.heading[i]);
  }
  io::Table table = AttitudeTable(g);
  ExpectMatchesTruth(DetectManeuvers(table), g.truth);
}

TEST(DetectManeuvers, FindsBoxFromFluxgateAloneAtCardinalHeadings) {
  // Mid-latitude field: horizontal 19000 nT, down 45000 nT (inclination
  // 67 deg), typical of the northern mid-latitudes (from memory).
  const Flight f = MakeBox({0, 90, 180, 270}, 10.0, 5);
  const ManeuverDetection found =
      DetectManeuvers(FluxgateTable(f, 19000, 45000, 6));
  EXPECT_EQ(found.source, "fluxgate heading");
  ExpectMatchesTruth(found, f.truth);
  // On north/south legs yaw and roll move the field alike; the result says
  // that their kinds came from the amplitude.
  bool warned = false;
  for (const std::string& note : found.notes) {
    warned = warned || note.find("by amplitude only") != std::string::npos;
  }
  EXPECT_TRUE(warned);
}

TEST(DetectManeuvers, FindsBoxFromFluxgateAloneOnSurveyLineHeadings) {
  const Flight f = MakeBox({35, 125, 215, 305}, 10.0, 7);
  ExpectMatchesTruth(DetectManeuvers(FluxgateTable(f, 19000, 45000, 8)),
                     f.truth);
}

TEST(DetectManeuvers, FallsBackToFluxgateWhenAttitudeColumnsAreMostlyEmpty) {
  const Flight f = MakeBox({0, 90, 180, 270}, 10.0, 10);
  io::Table table = FluxgateTable(f, 19000, 45000, 11);
  for (const char* name : {"roll", "pitch", "heading"}) {
    table.AddChannel({name, "deg", ""});  // all NaN
  }
  const ManeuverDetection found = DetectManeuvers(table);
  EXPECT_EQ(found.source, "fluxgate heading");
  EXPECT_EQ(found.maneuvers.size(), f.truth.size());
}

TEST(DetectManeuvers, RefusesRecordingWithoutAttitudeOrFluxgate) {
  io::Table table({{"time", "s", ""}, {"f", "nT", ""}});
  table.Column("time") = {0, 1, 2};
  table.Column("f") = {1, 2, 3};
  EXPECT_THROW(DetectManeuvers(table), std::invalid_argument);
  ManeuverDetectionOptions options;
  options.window_s = 0;
  EXPECT_THROW(DetectManeuvers(AttitudeTable(MakeBox({0}, 10, 1)), options),
               std::invalid_argument);
}

TEST(ManeuverKind, NamesRoundTripCaseInsensitively) {
  for (ManeuverKind k :
       {ManeuverKind::kPitch, ManeuverKind::kRoll, ManeuverKind::kYaw}) {
    ManeuverKind parsed = ManeuverKind::kYaw;
    EXPECT_TRUE(ParseManeuverKind(ManeuverKindName(k), &parsed));
    EXPECT_EQ(parsed, k);
  }
  ManeuverKind parsed;
  EXPECT_TRUE(ParseManeuverKind("ROLL", &parsed));
  EXPECT_EQ(parsed, ManeuverKind::kRoll);
  EXPECT_FALSE(ParseManeuverKind("barrel", &parsed));
}

// Writes text to a fresh file under the build tree's working directory.
std::string WriteFile(const std::string& name, const std::string& text) {
  const std::string path = "maneuvers_test_" + name + ".csv";
  std::ofstream(path, std::ios::binary) << text;
  return path;
}

TEST(ReadSegmentsCsv, ReadsColumnsInAnyOrderWithCommentsAndCrlf) {
  const std::string path = WriteFile("good",
                                     "# box flown 2031-05-04\r\n"
                                     "kind, heading_deg ,start_s,end_s\r\n"
                                     "\r\n"
                                     "roll,90,200.5,230\r\n"
                                     "\"Pitch\",-90,100,130.25\r\n");
  const std::vector<Maneuver> m = ReadSegmentsCsv(path);
  ASSERT_EQ(m.size(), 2u);
  EXPECT_EQ(m[0].kind, ManeuverKind::kPitch);  // sorted by start
  EXPECT_EQ(m[0].heading_deg, 270.0);
  EXPECT_EQ(m[0].start_s, 100.0);
  EXPECT_EQ(m[0].end_s, 130.25);
  EXPECT_EQ(m[1].kind, ManeuverKind::kRoll);
  EXPECT_EQ(m[1].heading_deg, 90.0);
  std::remove(path.c_str());
}

void ExpectInputError(const std::string& name, const std::string& text,
                      std::size_t line, std::size_t column,
                      const std::string& words) {
  const std::string path = WriteFile(name, text);
  try {
    ReadSegmentsCsv(path);
    ADD_FAILURE() << name << ": no error";
  } catch (const io::InputError& e) {
    EXPECT_EQ(e.line(), line) << e.what();
    EXPECT_EQ(e.column(), column) << e.what();
    EXPECT_NE(std::string(e.what()).find(path), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find(words), std::string::npos) << e.what();
  }
  std::remove(path.c_str());
}

TEST(ReadSegmentsCsv, BadValuesNameLineColumnAndWhatWasExpected) {
  ExpectInputError("number", "start_s,end_s,heading_deg,kind\n0,10,abc,yaw\n",
                   2, 6, "finite number for heading_deg");
  ExpectInputError("kind", "start_s,end_s,heading_deg,kind\n0,10,0,loop\n", 2,
                   8, "pitch, roll or yaw");
  ExpectInputError("order", "start_s,end_s,heading_deg,kind\n10,5,0,yaw\n", 2,
                   4, "end_s must be after start_s");
  ExpectInputError("missing", "start_s,end_s,kind\n0,10,yaw\n", 1, 1,
                   "missing 'heading_deg'");
  ExpectInputError("fields", "start_s,end_s,heading_deg,kind\n0,10,0\n", 2, 1,
                   "expected 4 fields");
  ExpectInputError("nan", "start_s,end_s,heading_deg,kind\nnan,10,0,yaw\n", 2,
                   1, "finite number for start_s");
  ExpectInputError("empty", "# nothing\n", 0, 0, "empty segments file");
}

TEST(ReadSegmentsCsv, MissingFileIsAnInputError) {
  EXPECT_THROW(ReadSegmentsCsv("/nonexistent/segments.csv"), io::InputError);
}

}  // namespace
}  // namespace fluxtrim::core
