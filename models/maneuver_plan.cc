#include "models/maneuver_plan.h"

#include <algorithm>
#include <cmath>

namespace fluxtrim::models {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kTwoPi = 2.0 * kPi;
// Standard gravity, m/s^2 (CGPM 1901 conventional value).
constexpr double kGravity_mps2 = 9.80665;

// Wraps an angle to (-pi, pi].
double WrapPi(double a) {
  a = std::fmod(a, kTwoPi);
  if (a > kPi) a -= kTwoPi;
  if (a <= -kPi) a += kTwoPi;
  return a;
}

struct Step {
  double s, ds, dds;  // S, S', S'' with respect to x
};

Step SmoothStep(double x) {
  const double c = std::cos(kTwoPi * x), s = std::sin(kTwoPi * x);
  return {x - s / kTwoPi, 1.0 - c, kTwoPi * s};
}

// Maneuver envelope e(tau) and its derivative on a segment of duration d,
// ramp r = min(period / 2, d / 2).
void Envelope(double tau, double d, double period, double* e, double* de) {
  const double r = std::min(0.5 * period, 0.5 * d);
  if (!(r > 0)) {
    *e = 1.0;
    *de = 0.0;
    return;
  }
  if (tau < r) {
    const double a = kPi * tau / (2.0 * r);
    *e = std::sin(a) * std::sin(a);
    *de = (kPi / (2.0 * r)) * std::sin(2.0 * a);
  } else if (tau > d - r) {
    const double a = kPi * (d - tau) / (2.0 * r);
    *e = std::sin(a) * std::sin(a);
    *de = -(kPi / (2.0 * r)) * std::sin(2.0 * a);
  } else {
    *e = 1.0;
    *de = 0.0;
  }
}

PlanState EvaluateSegment(const PlanSegment& g, double tau) {
  const double d = g.duration_s;
  tau = std::clamp(tau, 0.0, d);
  const Step st = SmoothStep(tau / d);
  const double dc = g.course1 - g.course0;
  const double doff = g.yaw_offset1 - g.yaw_offset0;
  const double dtilt = g.tilt1 - g.tilt0;

  PlanState p;
  p.course = g.course0 + dc * st.s;
  const double course_rate = dc * st.ds / d;
  const double course_acc = dc * st.dds / (d * d);
  const double offset = g.yaw_offset0 + doff * st.s;
  const double offset_rate = doff * st.ds / d;
  const double tilt = g.tilt0 + dtilt * st.s;
  const double tilt_rate = dtilt * st.ds / d;
  p.tilt = tilt;
  p.speed_mps = g.stop ? 0.0 : g.speed_mps;
  p.kind = g.kind;
  p.reference_heading = g.reference_heading;

  const double co = std::cos(offset), so = std::sin(offset);
  p.attitude.heading = p.course + offset;
  p.rates.heading = course_rate + offset_rate;
  p.attitude.pitch = -tilt * co;
  p.rates.pitch = -tilt_rate * co + tilt * so * offset_rate;
  p.attitude.roll = -tilt * so;
  p.rates.roll = -tilt_rate * so - tilt * co * offset_rate;
  if (g.bank && course_rate != 0.0) {
    const double x = g.speed_mps * course_rate / kGravity_mps2;
    const double dx = g.speed_mps * course_acc / kGravity_mps2;
    p.attitude.roll += std::atan(x);
    p.rates.roll += dx / (1.0 + x * x);
  }
  if (g.amplitude != 0.0 && g.period_s > 0 &&
      (g.kind == ManeuverKind::kPitch || g.kind == ManeuverKind::kRoll ||
       g.kind == ManeuverKind::kYaw)) {
    double e, de;
    Envelope(tau, d, g.period_s, &e, &de);
    const double w = kTwoPi / g.period_s;
    const double v = g.amplitude * e * std::sin(w * tau);
    const double dv =
        g.amplitude * (de * std::sin(w * tau) + e * w * std::cos(w * tau));
    if (g.kind == ManeuverKind::kPitch) {
      p.attitude.pitch += v;
      p.rates.pitch += dv;
    } else if (g.kind == ManeuverKind::kRoll) {
      p.attitude.roll += v;
      p.rates.roll += dv;
    } else {
      p.attitude.heading += v;
      p.rates.heading += dv;
    }
  }
  return p;
}

// Integral of f over [0, 1] by composite Simpson's rule, n even.
template <typename F>
double Simpson(F f, int n) {
  const double h = 1.0 / n;
  double sum = f(0.0) + f(1.0);
  for (int i = 1; i < n; ++i) sum += (i % 2 ? 4.0 : 2.0) * f(i * h);
  return sum * h / 3.0;
}

double TurnDuration(double delta, const TurnOptions& turn) {
  return std::max(turn.min_turn_s, 2.0 * std::fabs(delta) / turn.max_turn_rate);
}

}  // namespace

void ManeuverPlan::Append(PlanSegment segment) {
  if (!(segment.duration_s > 0)) return;
  segment.start_s = duration_s();
  segments_.push_back(segment);
}

double ManeuverPlan::duration_s() const {
  if (segments_.empty()) return 0.0;
  return segments_.back().start_s + segments_.back().duration_s;
}

double ManeuverPlan::end_course() const {
  return segments_.empty() ? initial_course_ : segments_.back().course1;
}
double ManeuverPlan::end_yaw_offset() const {
  return segments_.empty() ? 0.0 : segments_.back().yaw_offset1;
}
double ManeuverPlan::end_tilt() const {
  return segments_.empty() ? 0.0 : segments_.back().tilt1;
}

PlanState ManeuverPlan::Evaluate(double t) const {
  if (segments_.empty()) {
    PlanState p;
    p.course = p.attitude.heading = initial_course_;
    return p;
  }
  // Last segment starting at or before t.
  auto it = std::upper_bound(
      segments_.begin(), segments_.end(), t,
      [](double value, const PlanSegment& s) { return value < s.start_s; });
  if (it != segments_.begin()) --it;
  return EvaluateSegment(*it, t - it->start_s);
}

void AppendStraight(ManeuverPlan* plan, double duration_s, double speed_mps) {
  PlanSegment s;
  s.duration_s = duration_s;
  s.course0 = s.course1 = plan->end_course();
  s.yaw_offset0 = s.yaw_offset1 = plan->end_yaw_offset();
  s.tilt0 = s.tilt1 = plan->end_tilt();
  s.speed_mps = speed_mps;
  plan->Append(s);
}

void AppendTurn(ManeuverPlan* plan, double delta, double speed_mps,
                const TurnOptions& turn) {
  if (std::fabs(delta) < 1e-12) return;
  PlanSegment s;
  s.duration_s = TurnDuration(delta, turn);
  s.course0 = plan->end_course();
  s.course1 = s.course0 + delta;
  s.yaw_offset0 = s.yaw_offset1 = plan->end_yaw_offset();
  s.tilt0 = s.tilt1 = plan->end_tilt();
  s.speed_mps = speed_mps;
  s.bank = turn.bank;
  s.stop = turn.stop;
  plan->Append(s);
}

ManeuverPlan BuildCompensationBox(const CompensationBoxOptions& o) {
  ManeuverPlan plan(o.headings.empty() ? 0.0 : o.headings[0]);
  for (std::size_t h = 0; h < o.headings.size(); ++h) {
    if (h > 0) {
      AppendTurn(&plan, WrapPi(o.headings[h] - o.headings[h - 1]),
                 o.speed_mps, o.turn);
    }
    AppendStraight(&plan, o.lead_in_s, o.speed_mps);
    const double course = plan.end_course();
    for (ManeuverKind kind : o.sequence) {
      PlanSegment m;
      m.kind = kind;
      m.reference_heading = course;
      m.course0 = m.course1 = course;
      m.speed_mps = o.speed_mps;
      if (kind == ManeuverKind::kPitch) {
        m.amplitude = o.pitch_amplitude;
        m.period_s = o.pitch_period_s;
      } else if (kind == ManeuverKind::kRoll) {
        m.amplitude = o.roll_amplitude;
        m.period_s = o.roll_period_s;
      } else {
        m.amplitude = o.yaw_amplitude;
        m.period_s = o.yaw_period_s;
      }
      m.duration_s = o.cycles * m.period_s;
      plan.Append(m);
      AppendStraight(&plan, o.settle_s, o.speed_mps);
    }
  }
  return plan;
}

double TwoQuarterTurnSpacing_m(double duration_s, double speed_mps,
                               bool stop) {
  if (stop) return 0.0;
  const double quarter = 0.5 * kPi;
  const double side = Simpson(
      [quarter](double x) { return std::sin(quarter * SmoothStep(x).s); },
      400);
  const double ahead = Simpson(
      [quarter](double x) { return std::cos(quarter * SmoothStep(x).s); },
      400);
  return speed_mps * duration_s * (side + ahead);
}

ManeuverPlan BuildSurveyLines(const SurveyLinesOptions& o) {
  ManeuverPlan plan(o.heading);
  AppendStraight(&plan, o.lead_in_s, o.speed_mps);
  const double quarter = 0.5 * kPi;
  const double turn_s = TurnDuration(quarter, o.turn);
  const double turns_m =
      TwoQuarterTurnSpacing_m(turn_s, o.speed_mps, o.turn.stop);
  const double transit_m = std::max(0.0, o.line_spacing_m - turns_m);
  double side = o.first_turn_right ? 1.0 : -1.0;
  for (int line = 0; line < o.line_count; ++line) {
    AppendStraight(&plan, o.line_length_m / o.speed_mps, o.speed_mps);
    if (line + 1 == o.line_count) break;
    AppendTurn(&plan, side * quarter, o.speed_mps, o.turn);
    AppendStraight(&plan, transit_m / o.speed_mps, o.speed_mps);
    AppendTurn(&plan, side * quarter, o.speed_mps, o.turn);
    side = -side;
  }
  return plan;
}

ManeuverPlan BuildDroneRotations(const DroneRotationOptions& o) {
  ManeuverPlan plan(o.drift_course);
  AppendStraight(&plan, o.hover_s, o.speed_mps);
  double direction = 1.0;
  for (double tilt : o.tilts) {
    PlanSegment t;
    t.duration_s = o.transition_s;
    t.course0 = t.course1 = o.drift_course;
    t.yaw_offset0 = t.yaw_offset1 = plan.end_yaw_offset();
    t.tilt0 = plan.end_tilt();
    t.tilt1 = tilt;
    t.speed_mps = o.speed_mps;
    plan.Append(t);
    PlanSegment r;
    const double sweep = kTwoPi * o.turns_per_tilt;
    r.duration_s = sweep / o.mean_yaw_rate;
    r.kind = ManeuverKind::kRotation;
    r.reference_heading = o.drift_course;
    r.course0 = r.course1 = o.drift_course;
    r.yaw_offset0 = plan.end_yaw_offset();
    r.yaw_offset1 = r.yaw_offset0 + direction * sweep;
    r.tilt0 = r.tilt1 = tilt;
    r.speed_mps = o.speed_mps;
    plan.Append(r);
    if (o.alternate_direction) direction = -direction;
  }
  PlanSegment level;
  level.duration_s = o.transition_s;
  level.course0 = level.course1 = o.drift_course;
  level.yaw_offset0 = level.yaw_offset1 = plan.end_yaw_offset();
  level.tilt0 = plan.end_tilt();
  level.tilt1 = 0.0;
  level.speed_mps = o.speed_mps;
  plan.Append(level);
  AppendStraight(&plan, o.hover_s, o.speed_mps);
  return plan;
}

ManeuverPlan BuildVehicleLoop(const VehicleLoopOptions& o) {
  ManeuverPlan plan(o.legs.empty() ? 0.0 : o.legs[0].heading);
  if (o.legs.empty()) return plan;
  AppendStraight(&plan, o.lead_in_s, o.speed_mps);
  const std::size_t n = o.legs.size();
  for (int lap = 0; lap < o.laps; ++lap) {
    for (std::size_t i = 0; i < n; ++i) {
      AppendStraight(&plan, o.legs[i].length_m / o.speed_mps, o.speed_mps);
      const bool last = lap + 1 == o.laps && i + 1 == n;
      if (last) break;
      const double next = o.legs[(i + 1) % n].heading;
      AppendTurn(&plan, WrapPi(next - o.legs[i].heading), o.speed_mps,
                 o.turn);
    }
  }
  return plan;
}

}  // namespace fluxtrim::models
