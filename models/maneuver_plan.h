#pragma once
// Maneuver plans: the attitude and course of a platform as smooth, exactly
// differentiable functions of time, built from segments (straight legs,
// turns, pitch/roll/yaw maneuvers, drone rotations at a tilt).
//
// Within a segment of duration D every changing angle follows the smooth
// step S(x) = x - sin(2 pi x) / (2 pi), x = tau / D, whose rate
// S'(x) = 1 - cos(2 pi x) is zero at both ends: angles and angular rates
// are continuous where segments join, so the eddy-current field (which
// follows the rates) never jumps. Per segment:
//   course    = course0 + (course1 - course0) S      (turns)
//   offset    = offset0 + (offset1 - offset0) S      (heading - course)
//   tilt      = tilt0 + (tilt1 - tilt0) S            (drones)
//   heading   = course + offset [+ yaw maneuver]
//   pitch     = -tilt cos(offset) [+ pitch maneuver]
//   roll      = -tilt sin(offset) [+ bank] [+ roll maneuver]
// The tilt leans the platform towards its course (a drone drifting along
// the course while it yaws underneath: nose down when heading along the
// course). The bank of a coordinated turn is atan(v course' / g) (the
// textbook level-turn relation, e.g. Anderson, "Introduction to Flight",
// sec. 6.17, from memory); positive, starboard wing down, when turning
// right. A maneuver is A e(tau) sin(2 pi tau / P) with the envelope e
// rising as sin^2 over the first half period and falling likewise over the
// last, so it too starts and ends with zero rate.
//
// Angles in radians, times in seconds from the start of the plan. Headings
// and courses are from true north, clockwise, and are not wrapped (a plan
// that circles twice ends near 4 pi).

#include <limits>
#include <vector>

#include "models/attitude.h"

namespace fluxtrim::models {

enum class ManeuverKind : int {
  kNone = 0,
  kPitch = 1,
  kRoll = 2,
  kYaw = 3,
  kRotation = 4,  // drone calibration rotation at a tilt
};

struct PlanSegment {
  double start_s = 0.0;  // set by ManeuverPlan::Append
  double duration_s = 0.0;
  ManeuverKind kind = ManeuverKind::kNone;
  // Heading the maneuver is flown on (rad); NaN for kNone.
  double reference_heading = std::numeric_limits<double>::quiet_NaN();
  double course0 = 0.0, course1 = 0.0;          // rad
  double yaw_offset0 = 0.0, yaw_offset1 = 0.0;  // rad, heading - course
  double tilt0 = 0.0, tilt1 = 0.0;              // rad
  double speed_mps = 0.0;                       // ground speed
  bool bank = false;                            // coordinated-turn bank
  // Turn on the spot (multirotor drones): speed 0 throughout the segment.
  // The speed change at its ends is taken as instantaneous; it moves the
  // track only (position, hence main field and geology), not the attitude.
  bool stop = false;
  double amplitude = 0.0;  // rad, pitch/roll/yaw maneuver amplitude
  double period_s = 0.0;   // of the maneuver
};

struct PlanState {
  Attitude attitude;  // rad
  Attitude rates;     // Euler angle rates, rad/s
  double course = 0.0;     // rad
  double speed_mps = 0.0;
  double tilt = 0.0;       // rad, commanded tilt (drones)
  ManeuverKind kind = ManeuverKind::kNone;
  double reference_heading = std::numeric_limits<double>::quiet_NaN();
};

class ManeuverPlan {
 public:
  // initial_course (rad): the course of an empty plan, taken by the first
  // segment appended with AppendStraight or AppendTurn.
  explicit ManeuverPlan(double initial_course = 0.0)
      : initial_course_(initial_course) {}
  // Appends the segment after the current end (sets its start_s). Segments
  // of zero duration are dropped.
  void Append(PlanSegment segment);
  double duration_s() const;
  const std::vector<PlanSegment>& segments() const { return segments_; }
  // State at t_s (s from the start of the plan); outside [0, duration] the
  // state at the nearest end.
  PlanState Evaluate(double t_s) const;
  // Course, yaw offset and tilt at the end of the plan (initial course, 0,
  // 0 when empty).
  double end_course() const;
  double end_yaw_offset() const;
  double end_tilt() const;

 private:
  double initial_course_ = 0.0;
  std::vector<PlanSegment> segments_;
};

// Turn limits of a platform.
struct TurnOptions {
  double max_turn_rate = 3.0 * 3.14159265358979323846 / 180.0;  // rad/s, peak
  double min_turn_s = 5.0;  // shortest turn
  bool bank = true;         // coordinated turns (aircraft, helicopters)
  bool stop = false;        // stop and turn on the spot (multirotors)
};

// Appends a turn from the plan's end course by delta_course (rad; positive
// to the right) at speed_mps: duration max(min_turn_s, 2 |delta| /
// max_turn_rate) (the peak rate of S is twice the mean).
void AppendTurn(ManeuverPlan* plan, double delta_course, double speed_mps,
                const TurnOptions& turn);
// Appends a straight segment on the plan's end course.
void AppendStraight(ManeuverPlan* plan, double duration_s, double speed_mps);

// (a) Compensation box: on each heading a lead-in, then each maneuver of
// the sequence followed by a settle time, then a turn to the next heading.
// Defaults are common practice (pitch +-5 deg, roll +-10 deg, yaw +-5 deg,
// periods of 4-8 s: SEG Dictionary of Geophysics, entries "compensation
// test" and "figure of merit", after Geological Survey of Canada 1991; from
// memory).
struct CompensationBoxOptions {
  std::vector<double> headings = {0.0, 1.5707963267948966,
                                  3.14159265358979323846,
                                  4.71238898038468985769};  // rad
  std::vector<ManeuverKind> sequence = {ManeuverKind::kPitch,
                                        ManeuverKind::kRoll,
                                        ManeuverKind::kYaw};
  double pitch_amplitude = 5.0 * 3.14159265358979323846 / 180.0;   // rad
  double roll_amplitude = 10.0 * 3.14159265358979323846 / 180.0;   // rad
  double yaw_amplitude = 5.0 * 3.14159265358979323846 / 180.0;     // rad
  double pitch_period_s = 6.0;
  double roll_period_s = 6.0;
  double yaw_period_s = 6.0;
  int cycles = 3;
  double settle_s = 10.0;   // straight and level after each maneuver
  double lead_in_s = 20.0;  // straight and level before the first maneuver
  double speed_mps = 70.0;
  TurnOptions turn;
};
ManeuverPlan BuildCompensationBox(const CompensationBoxOptions& options);

// (b) Survey lines of reciprocal headings. Between lines: a 90 deg turn, a
// transit leg, a second 90 deg turn the same way, the transit sized so the
// lines lie line_spacing_m apart (when the two turns alone need more room,
// the transit is dropped and the lines lie wider apart). The first line is
// flown on `heading`, the next lies to its right when first_turn_right.
struct SurveyLinesOptions {
  double heading = 0.0;  // rad
  int line_count = 2;
  double line_length_m = 10000.0;
  double line_spacing_m = 500.0;
  double lead_in_s = 10.0;
  bool first_turn_right = true;
  double speed_mps = 70.0;
  TurnOptions turn;
};
ManeuverPlan BuildSurveyLines(const SurveyLinesOptions& options);

// Sideways displacement of a 90 deg turn (duration_s at speed_mps; zero
// when the platform turns on the spot) plus its forward displacement: the
// spacing two such turns give without transit.
double TwoQuarterTurnSpacing_m(double duration_s, double speed_mps,
                               bool stop);

// (c) Drone calibration: hover, then at each tilt a transition to the tilt
// and a full rotation in yaw (turns_per_tilt turns at mean_yaw_rate,
// alternating direction when asked) while drifting along drift_course;
// finally back to level and hover. The tilt keeps its direction in the
// Earth frame (towards the drift course; negative: away from it) while the
// body yaws under it, so the angle between the field and the body z axis is
// set by the tilt and its sign and the yaw sweeps the rest: tilts of both
// signs make the field direction cover a wide band of the sphere.
struct DroneRotationOptions {
  // rad: 0, 15, -15, 30, -30 deg.
  std::vector<double> tilts = {0.0, 0.2617993877991494, -0.2617993877991494,
                               0.5235987755982988, -0.5235987755982988};
  double mean_yaw_rate = 0.5235987755982988;         // rad/s (30 deg/s)
  double turns_per_tilt = 1.0;
  double transition_s = 4.0;
  double hover_s = 5.0;
  double drift_course = 0.0;  // rad
  double speed_mps = 0.5;
  bool alternate_direction = true;
};
ManeuverPlan BuildDroneRotations(const DroneRotationOptions& options);

// (d) Ground-vehicle loop: legs joined by flat turns (no bank), repeated
// `laps` times; pitch and roll come only from the road (turbulence options
// of the simulator).
struct VehicleLeg {
  double heading = 0.0;  // rad
  double length_m = 200.0;
};
struct VehicleLoopOptions {
  std::vector<VehicleLeg> legs = {{0.0, 200.0},
                                  {1.5707963267948966, 200.0},
                                  {3.14159265358979323846, 200.0},
                                  {4.71238898038468985769, 200.0}};
  int laps = 1;
  double lead_in_s = 5.0;
  double speed_mps = 3.0;
  TurnOptions turn = {15.0 * 3.14159265358979323846 / 180.0, 2.0, false};
};
ManeuverPlan BuildVehicleLoop(const VehicleLoopOptions& options);

}  // namespace fluxtrim::models
