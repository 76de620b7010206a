#include "src/core/maneuvers.h"

#include <algorithm>
#include <array>
#include <cctype>
#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <fstream>
#include <map>
#include <sstream>
#include <stdexcept>

#include "io/error.h"
#include "models/huge_pages.h"

namespace fluxtrim::core {

using models::HugeVector;
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kDeg = 180.0 / kPi;
constexpr int kKinds = 3;  // index = static_cast<int>(ManeuverKind)
constexpr int kNone = -1;

using Vec3 = std::array<double, 3>;

double Dot(const Vec3& a, const Vec3& b) {
  return a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
}
Vec3 Cross(const Vec3& a, const Vec3& b) {
  return {a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2],
          a[0] * b[1] - a[1] * b[0]};
}

double Wrap360(double deg) {
  double w = std::fmod(deg, 360.0);
  if (w < 0) w += 360.0;
  if (w >= 360.0) w -= 360.0;  // fmod of a tiny negative can round to 360
  return w;
}

// Smallest signed difference a - b of two angles (deg), in (-180, 180].
double AngleDiff(double a, double b) {
  double d = std::fmod(a - b, 360.0);
  if (d > 180.0) d -= 360.0;
  if (d <= -180.0) d += 360.0;
  return d;
}

// Centred running means over [i - half, i + half], truncated at the ends,
// of `Channels` series at once (sample i of channel c: value(i, c)).
// Long double prefix sums keep the error far below the deviations of
// interest even over long, unwrapped heading series; only the last
// 2 half + 2 prefix sums are kept (a ring), so memory stays O(half) and the
// prefix values are the same as over the whole series. emit(i, mean) is
// called for i = 0..n-1 in order, mean[c] the mean of channel c.
template <std::size_t Channels, typename Value, typename Emit>
void RunningMeans(std::size_t n, std::size_t half, Value value, Emit emit) {
  std::size_t ring = 1;  // a power of two >= 2 half + 2 (index by mask)
  while (ring < 2 * half + 2) ring *= 2;
  const std::size_t mask = ring - 1;
  std::vector<std::array<long double, Channels>> prefix(ring);
  prefix[0].fill(0.0L);
  std::size_t filled = 0;  // prefix sums known: P[0..filled]
  long double inv = 0.0L;
  std::size_t inv_count = 0;
  double mean[Channels];
  for (std::size_t i = 0; i < n; ++i) {
    const std::size_t lo = i >= half ? i - half : 0;
    const std::size_t hi = std::min(n, i + half + 1);
    while (filled < hi) {
      const auto& prev = prefix[filled & mask];
      auto& next = prefix[(filled + 1) & mask];
      for (std::size_t c = 0; c < Channels; ++c) next[c] = prev[c] + value(filled, c);
      ++filled;
    }
    if (hi - lo != inv_count) {
      inv_count = hi - lo;
      inv = 1.0L / static_cast<long double>(inv_count);
    }
    const auto& ph = prefix[hi & mask];
    const auto& pl = prefix[lo & mask];
    for (std::size_t c = 0; c < Channels; ++c) {
      mean[c] = static_cast<double>((ph[c] - pl[c]) * inv);
    }
    emit(i, mean);
  }
}

struct CircularStats {
  double mean_deg = 0;
  double spread_deg = 0;  // circular standard deviation sqrt(-2 ln R)
};

// Circular mean and standard deviation (Mardia & Jupp, "Directional
// Statistics", 2000, sec. 2.3.4).
CircularStats Circular(const double* deg, std::size_t n) {
  double s = 0, c = 0;
  for (std::size_t i = 0; i < n; ++i) {
    s += std::sin(deg[i] / kDeg);
    c += std::cos(deg[i] / kDeg);
  }
  CircularStats stats;
  stats.mean_deg = Wrap360(std::atan2(s, c) * kDeg);
  const double r =
      std::min(1.0, std::hypot(s, c) / std::max<std::size_t>(n, 1));
  stats.spread_deg = r > 0 ? std::sqrt(-2.0 * std::log(r)) * kDeg : 180.0;
  return stats;
}

// One gap-free stretch of the recording, reduced to what the segmentation
// needs.
struct Piece {
  const double* t = nullptr;                   // s (the recording's column)
  std::size_t n = 0;
  std::vector<Vec3> w;                         // deviation vector (deg)
  // Roll/pitch/yaw axes as seen: one set for the whole piece (attitude
  // path) or one per sample (fluxgate path).
  std::array<Vec3, kKinds> fixed_axis{};
  std::vector<std::array<Vec3, kKinds>> axis;
  std::vector<double> heading_deg;             // unwrapped heading (deg)
  const std::array<Vec3, kKinds>& Axis(std::size_t i) const {
    return axis.empty() ? fixed_axis : axis[i];
  }
};

struct Segment {
  int kind = kNone;
  std::size_t begin = 0;  // sample indices in the piece, [begin, end)
  std::size_t end = 0;
  double start_s = 0;
  double end_s = 0;
  double heading_deg = 0;
};

std::string Fixed(double v, int digits) {
  std::ostringstream s;
  s.setf(std::ios::fixed);
  s.precision(digits);
  s << v;
  return s.str();
}

struct Counters {
  std::size_t turns = 0;         // segments dropped as turns
  std::size_t short_ones = 0;    // segments dropped as too short
  double max_rms_deg = 0;        // largest windowed deviation RMS seen
  std::size_t by_amplitude = 0;  // kinds told apart by amplitude only
};

// Time where the series e crosses `level` between samples i-1 and i.
double CrossingTime(const double* t, const std::vector<double>& e,
                    std::size_t i, double level) {
  if (i == 0) return t[0];
  const double de = e[i] - e[i - 1];
  if (de == 0) return t[i];
  const double f = std::clamp((level - e[i - 1]) / de, 0.0, 1.0);
  return t[i - 1] + f * (t[i] - t[i - 1]);
}

void SegmentPiece(const Piece& piece, double rms_threshold_deg,
                  const ManeuverDetectionOptions& options, double dt,
                  std::vector<Segment>* out, Counters* counters) {
  const std::size_t n = piece.n;
  const std::size_t half =
      static_cast<std::size_t>(std::lround(0.5 * options.window_s / dt));
  // Windowed second moments M_ab = mean(w_a w_b), computed on the fly.
  static constexpr int kPairs[6][2] = {{0, 0}, {1, 1}, {2, 2},
                                       {0, 1}, {0, 2}, {1, 2}};
  // Energy along each kind's axis, and the per-sample label.
  std::array<std::vector<double>, kKinds> energy;
  for (auto& e : energy) e = HugeVector(n, 0.0);
  std::vector<int> label = HugeVector(n, kNone);
  // Samples whose kind was decided by amplitude, not direction.
  std::vector<char> by_amplitude(n, 0);
  const double typical[kKinds] = {options.typical_pitch_deg,
                                  options.typical_roll_deg,
                                  options.typical_yaw_deg};
  auto product = [&piece](std::size_t i, std::size_t p) {
    return piece.w[i][kPairs[p][0]] * piece.w[i][kPairs[p][1]];
  };
  RunningMeans<6>(n, half, product, [&](std::size_t i, const double* m) {
    const double total = m[0] + m[1] + m[2];
    counters->max_rms_deg =
        std::max(counters->max_rms_deg, std::sqrt(std::max(total, 0.0)));
    double share[kKinds], amplitude[kKinds];
    for (int k = 0; k < kKinds; ++k) {
      const Vec3& d = piece.Axis(i)[k];
      const double d2 = Dot(d, d);
      if (!(d2 > 1e-6)) {  // axis along the field: invisible
        share[k] = 0;
        amplitude[k] = 0;
        continue;
      }
      // u^T M u / |d|^2 with u = d / |d|.
      const double e = (d[0] * d[0] * m[0] + d[1] * d[1] * m[1] +
                        d[2] * d[2] * m[2] + 2 * d[0] * d[1] * m[3] +
                        2 * d[0] * d[2] * m[4] + 2 * d[1] * d[2] * m[5]) /
                       d2;
      energy[k][i] = std::max(e, 0.0);
      share[k] = total > 0 ? energy[k][i] / total : 0;
      // Implied peak body angle of a sine with this RMS.
      amplitude[k] = std::sqrt(2.0 * energy[k][i] / d2);
    }
    if (!(std::sqrt(std::max(total, 0.0)) >= rms_threshold_deg)) return;
    int best = 0;
    for (int k = 1; k < kKinds; ++k) {
      if (share[k] > share[best]) best = k;
    }
    if (share[best] < options.min_share) return;
    int chosen = best;
    double chosen_score = 0;  // set when a second kind competes
    for (int k = 0; k < kKinds; ++k) {
      if (k == best || share[k] < share[best] - options.ambiguity_share) {
        continue;
      }
      if (!by_amplitude[i]) {
        chosen_score = std::abs(std::log(amplitude[best] / typical[best]));
      }
      by_amplitude[i] = 1;
      const double score = std::abs(std::log(amplitude[k] / typical[k]));
      if (score < chosen_score) {
        chosen = k;
        chosen_score = score;
      }
    }
    label[i] = chosen;
  });

  // Runs of one label; short blips become unassigned.
  auto runs_of = [&](const std::vector<int>& lab) {
    std::vector<Segment> runs;
    std::size_t i = 0;
    while (i < n) {
      std::size_t j = i;
      while (j < n && lab[j] == lab[i]) ++j;
      if (lab[i] != kNone) {
        Segment s;
        s.kind = lab[i];
        s.begin = i;
        s.end = j;
        runs.push_back(s);
      }
      i = j;
    }
    return runs;
  };
  for (const Segment& r : runs_of(label)) {
    if (piece.t[r.end - 1] - piece.t[r.begin] < options.min_blip_s) {
      std::fill(label.begin() + r.begin, label.begin() + r.end, kNone);
    }
  }
  std::vector<Segment> runs = runs_of(label);
  std::vector<Segment> merged;
  for (const Segment& r : runs) {
    if (!merged.empty() && merged.back().kind == r.kind &&
        piece.t[r.begin] - piece.t[merged.back().end - 1] <=
            options.merge_gap_s) {
      merged.back().end = r.end;
    } else {
      merged.push_back(r);
    }
  }

  // Trim each run to the half-plateau crossings of its kind's energy.
  std::size_t floor_index = 0;  // the previous segment's end
  for (std::size_t s = 0; s < merged.size(); ++s) {
    Segment seg = merged[s];
    const std::vector<double>& e = energy[seg.kind];
    std::vector<double> inside(e.begin() + seg.begin, e.begin() + seg.end);
    // Plateau: 80th percentile, robust to the ramps at both ends and to the
    // ripple of a window that is not a whole number of half-periods.
    const std::size_t q = (inside.size() * 4) / 5;
    std::nth_element(inside.begin(), inside.begin() + q, inside.end());
    const double level = 0.5 * inside[q];
    const std::size_t ceiling = s + 1 < merged.size() ? merged[s + 1].begin : n;
    std::size_t b = seg.begin;
    while (b > floor_index && e[b - 1] >= level) --b;
    while (b + 1 < seg.end && e[b] < level) ++b;
    std::size_t last = seg.end - 1;
    while (last + 1 < ceiling && e[last + 1] >= level) ++last;
    while (last > b && e[last] < level) --last;
    seg.begin = b;
    seg.end = last + 1;
    seg.start_s = CrossingTime(piece.t, e, b, level);
    seg.end_s = last + 1 < n ? CrossingTime(piece.t, e, last + 1, level)
                             : piece.t[last];
    floor_index = seg.end;
    if (seg.end_s - seg.start_s < options.min_duration_s) {
      ++counters->short_ones;
      continue;
    }
    // Heading statistics; a steady heading change is a turn.
    const std::size_t count = seg.end - seg.begin;
    const CircularStats stats =
        Circular(piece.heading_deg.data() + seg.begin, count);
    double st = 0, sh = 0, stt = 0, sth = 0;
    for (std::size_t i = seg.begin; i < seg.end; ++i) {
      const double tt = piece.t[i] - piece.t[seg.begin];
      const double hh = piece.heading_deg[i] - piece.heading_deg[seg.begin];
      st += tt;
      sh += hh;
      stt += tt * tt;
      sth += tt * hh;
    }
    const double var = stt - st * st / count;
    const double rate = var > 0 ? (sth - st * sh / count) / var : 0.0;
    // Roll-in and roll-out of a turn look like a short oscillation next to a
    // heading change: compare the heading half a window before and after.
    const std::size_t margin = std::max<std::size_t>(half, 1);
    const std::size_t before = seg.begin >= margin ? seg.begin - margin : 0;
    const std::size_t after = std::min(n - 1, seg.end - 1 + margin);
    const double across =
        std::abs(piece.heading_deg[after] - piece.heading_deg[before]);
    if (stats.spread_deg > options.max_heading_spread_deg ||
        std::abs(rate) > options.max_turn_rate_deg_s ||
        across > options.max_heading_spread_deg) {
      ++counters->turns;
      continue;
    }
    seg.heading_deg = stats.mean_deg;
    const std::size_t ambiguous = static_cast<std::size_t>(std::count(
        by_amplitude.begin() + seg.begin, by_amplitude.begin() + seg.end, 1));
    if (2 * ambiguous > count) ++counters->by_amplitude;
    out->push_back(seg);
  }
}

std::vector<std::size_t> PieceBreaks(const std::vector<double>& t,
                                     const std::vector<bool>& valid,
                                     double gap_factor, double* dt_median) {
  std::vector<double> dts;
  for (std::size_t i = 1; i < t.size(); ++i) {
    const double d = t[i] - t[i - 1];
    if (std::isfinite(d) && d > 0) dts.push_back(d);
  }
  if (dts.empty()) {
    *dt_median = 0;
    return {};
  }
  std::nth_element(dts.begin(), dts.begin() + dts.size() / 2, dts.end());
  *dt_median = dts[dts.size() / 2];
  // Break before i when sample i cannot continue the previous one.
  std::vector<std::size_t> breaks;
  for (std::size_t i = 0; i < t.size(); ++i) {
    bool brk = !valid[i];
    if (!brk && i > 0) {
      const double d = t[i] - t[i - 1];
      brk = !valid[i - 1] || !(d > 0) || d > gap_factor * *dt_median;
    }
    if (brk) breaks.push_back(i);
  }
  return breaks;
}

std::string Lower(std::string s) {
  for (char& c : s)
    c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

}  // namespace

const char* ManeuverKindName(ManeuverKind kind) {
  switch (kind) {
    case ManeuverKind::kPitch:
      return "pitch";
    case ManeuverKind::kRoll:
      return "roll";
    case ManeuverKind::kYaw:
      return "yaw";
  }
  return "unknown";
}

bool ParseManeuverKind(const std::string& text, ManeuverKind* kind) {
  const std::string t = Lower(text);
  for (ManeuverKind k :
       {ManeuverKind::kPitch, ManeuverKind::kRoll, ManeuverKind::kYaw}) {
    if (t == ManeuverKindName(k)) {
      *kind = k;
      return true;
    }
  }
  return false;
}

bool ManeuverDetectionOptions::IsValid(std::string* error) const {
  const std::pair<const char*, double> positive[] = {
      {"window_s", window_s},
      {"min_rms_deg", min_rms_deg},
      {"min_rms_fluxgate_deg", min_rms_fluxgate_deg},
      {"typical_pitch_deg", typical_pitch_deg},
      {"typical_roll_deg", typical_roll_deg},
      {"typical_yaw_deg", typical_yaw_deg},
      {"min_duration_s", min_duration_s},
      {"max_heading_spread_deg", max_heading_spread_deg},
      {"max_turn_rate_deg_s", max_turn_rate_deg_s},
      {"heading_cluster_tol_deg", heading_cluster_tol_deg}};
  for (const auto& [name, value] : positive) {
    if (!(std::isfinite(value) && value > 0)) {
      if (error) *error = std::string(name) + " must be positive";
      return false;
    }
  }
  const std::pair<const char*, double> non_negative[] = {
      {"min_blip_s", min_blip_s}, {"merge_gap_s", merge_gap_s}};
  for (const auto& [name, value] : non_negative) {
    if (!(std::isfinite(value) && value >= 0)) {
      if (error) *error = std::string(name) + " must not be negative";
      return false;
    }
  }
  if (!(min_share > 0 && min_share <= 1)) {
    if (error) *error = "min_share must be in (0, 1]";
    return false;
  }
  if (!(ambiguity_share >= 0 && ambiguity_share < 1)) {
    if (error) *error = "ambiguity_share must be in [0, 1)";
    return false;
  }
  if (!(gap_factor > 1 && std::isfinite(gap_factor))) {
    if (error) *error = "gap_factor must be above 1";
    return false;
  }
  return true;
}

ManeuverDetection DetectManeuvers(const io::Table& recording,
                                  const ManeuverDetectionOptions& options) {
  std::string error;
  if (!options.IsValid(&error)) {
    throw std::invalid_argument("maneuver detection: " + error);
  }
  if (!recording.Has(recording.time_channel())) {
    throw std::invalid_argument("maneuver detection: no time channel '" +
                                recording.time_channel() + "'");
  }
  const std::vector<double>& time = recording.Column(recording.time_channel());
  const std::size_t n = time.size();
  ManeuverDetection result;
  const bool have_attitude = recording.Has("roll") && recording.Has("pitch") &&
                             recording.Has("heading");
  const bool fluxgate =
      recording.Has("bx") && recording.Has("by") && recording.Has("bz");
  if (!have_attitude && !fluxgate) {
    throw std::invalid_argument(
        "maneuver detection needs roll, pitch and heading (deg) or the "
        "fluxgate bx, by, bz (nT)");
  }
  bool attitude = have_attitude;
  if (have_attitude && fluxgate) {
    // Attitude columns that are mostly empty (a logger that lost the INS)
    // are worth less than a complete fluxgate.
    std::size_t finite = 0;
    const auto& roll = recording.Column("roll");
    const auto& pitch = recording.Column("pitch");
    const auto& heading = recording.Column("heading");
    for (std::size_t i = 0; i < n; ++i) {
      finite += std::isfinite(roll[i]) && std::isfinite(pitch[i]) &&
                std::isfinite(heading[i]);
    }
    if (2 * finite < n) {
      attitude = false;
      result.notes.push_back(
          "roll/pitch/heading hold values in only " + std::to_string(finite) +
          " of " + std::to_string(n) + " samples; used the fluxgate instead");
    }
  }
  result.source = attitude ? "attitude" : "fluxgate heading";

  // Per-sample inputs of either path; invalid samples split the recording.
  // Attitude path: the angle columns themselves; fluxgate path: c = B/|B|.
  std::vector<bool> valid(n, true);
  std::vector<Vec3> raw;
  const double* roll_col = nullptr;
  const double* pitch_col = nullptr;
  const double* heading_col = nullptr;
  if (attitude) {
    roll_col = recording.Column("roll").data();
    pitch_col = recording.Column("pitch").data();
    heading_col = recording.Column("heading").data();
    for (std::size_t i = 0; i < n; ++i) {
      if (!std::isfinite(time[i]) || !std::isfinite(roll_col[i]) ||
          !std::isfinite(pitch_col[i]) || !std::isfinite(heading_col[i])) {
        valid[i] = false;
      }
    }
  } else {
    raw.resize(n);
    const auto& bx = recording.Column("bx");
    const auto& by = recording.Column("by");
    const auto& bz = recording.Column("bz");
    for (std::size_t i = 0; i < n; ++i) {
      const double norm =
          std::sqrt(bx[i] * bx[i] + by[i] * by[i] + bz[i] * bz[i]);
      raw[i] = {bx[i] / norm, by[i] / norm, bz[i] / norm};
      if (!(norm > 0)) valid[i] = false;
    }
    for (std::size_t i = 0; i < n; ++i) {
      if (!std::isfinite(time[i]) || !std::isfinite(raw[i][0]) ||
          !std::isfinite(raw[i][1]) || !std::isfinite(raw[i][2])) {
        valid[i] = false;
      }
    }
  }
  double dt = 0;
  std::vector<std::size_t> breaks =
      PieceBreaks(time, valid, options.gap_factor, &dt);
  if (!(dt > 0)) {
    result.notes.push_back("no maneuvers: fewer than two valid time samples");
    return result;
  }
  breaks.push_back(n);
  const std::size_t min_piece = static_cast<std::size_t>(
      std::ceil(std::max(2 * options.window_s, options.min_duration_s) / dt));
  const std::size_t half =
      static_cast<std::size_t>(std::lround(0.5 * options.window_s / dt));

  std::vector<Segment> segments;
  Counters counters;
  std::size_t skipped_samples = 0;
  std::size_t begin = 0;
  Piece piece;
  for (std::size_t brk : breaks) {
    // Piece [begin, brk) minus a leading invalid sample.
    std::size_t b = begin;
    while (b < brk && !valid[b]) ++b;
    const std::size_t len = brk > b ? brk - b : 0;
    begin = brk;
    if (len == 0) continue;
    if (len < min_piece) {
      skipped_samples += len;
      continue;
    }
    piece.t = time.data() + b;
    piece.n = len;
    if (piece.w.capacity() < len) piece.w = HugeVector(len, Vec3{});
    piece.w.resize(len);
    if (piece.heading_deg.capacity() < len) piece.heading_deg = HugeVector(len, 0.0);
    piece.heading_deg.resize(len);
    if (attitude) {
      // Unwrap heading so that 359 -> 1 is a 2 deg step.
      std::vector<double>& unwrapped = piece.heading_deg;
      for (std::size_t i = 0; i < len; ++i) {
        unwrapped[i] =
            i == 0 ? heading_col[b]
                   : unwrapped[i - 1] +
                         AngleDiff(heading_col[b + i], heading_col[b + i - 1]);
      }
      const double* ch[3] = {roll_col + b, pitch_col + b, unwrapped.data()};
      // w = (roll, pitch, yaw) deviations; the kinds' axes are the unit
      // vectors in the order pitch, roll, yaw of ManeuverKind.
      RunningMeans<3>(
          len, half, [&ch](std::size_t i, std::size_t k) { return ch[k][i]; },
          [&](std::size_t i, const double* mean) {
            piece.w[i] = {ch[0][i] - mean[0], ch[1][i] - mean[1],
                          ch[2][i] - mean[2]};
          });
      piece.axis.clear();
      piece.fixed_axis = {Vec3{0, 1, 0}, Vec3{1, 0, 0}, Vec3{0, 0, 1}};
    } else {
      piece.axis.resize(len);
      double prev_heading = 0;
      const Vec3* c_raw = raw.data() + b;
      RunningMeans<3>(
          len, half,
          [c_raw](std::size_t i, std::size_t k) { return c_raw[i][k]; },
          [&](std::size_t i, const double* mean) {
        Vec3 c0 = {mean[0], mean[1], mean[2]};
        const double norm = std::sqrt(Dot(c0, c0));
        for (double& v : c0) v /= norm;
        const Vec3& c = c_raw[i];
        const Vec3 dc = {c[0] - c0[0], c[1] - c0[1], c[2] - c0[2]};
        const Vec3 w = Cross(dc, c0);
        piece.w[i] = {w[0] * kDeg, w[1] * kDeg, w[2] * kDeg};
        // Body axes of roll (x), pitch (y), yaw (z, near-level) projected
        // onto the plane perpendicular to the field.
        const Vec3 x = {1 - c0[0] * c0[0], -c0[1] * c0[0], -c0[2] * c0[0]};
        const Vec3 y = {-c0[0] * c0[1], 1 - c0[1] * c0[1], -c0[2] * c0[1]};
        const Vec3 z = {-c0[0] * c0[2], -c0[1] * c0[2], 1 - c0[2] * c0[2]};
        piece.axis[i] = {y, x, z};
        // Magnetic heading, level-flight assumption: the horizontal field
        // points north, so body x sees H cos(psi) and body y -H sin(psi).
        const double h = std::atan2(-c0[1], c0[0]) * kDeg;
        piece.heading_deg[i] =
            i == 0 ? h : prev_heading + AngleDiff(h, prev_heading);
        prev_heading = piece.heading_deg[i];
      });
    }
    SegmentPiece(piece,
                 attitude ? options.min_rms_deg : options.min_rms_fluxgate_deg,
                 options, dt, &segments, &counters);
  }
  // Heading clusters (box legs): greedy, in time order, circular means.
  struct Cluster {
    double s = 0, c = 0;
    std::size_t count = 0;
    double mean() const { return Wrap360(std::atan2(s, c) * kDeg); }
  };
  std::vector<Cluster> clusters;
  std::vector<std::size_t> member(segments.size());
  for (std::size_t i = 0; i < segments.size(); ++i) {
    const double h = segments[i].heading_deg;
    std::size_t found = clusters.size();
    double best = options.heading_cluster_tol_deg;
    for (std::size_t c = 0; c < clusters.size(); ++c) {
      const double d = std::abs(AngleDiff(h, clusters[c].mean()));
      if (d <= best) {
        best = d;
        found = c;
      }
    }
    if (found == clusters.size()) clusters.emplace_back();
    clusters[found].s += std::sin(h / kDeg);
    clusters[found].c += std::cos(h / kDeg);
    ++clusters[found].count;
    member[i] = found;
  }
  for (std::size_t i = 0; i < segments.size(); ++i) {
    Maneuver m;
    m.kind = static_cast<ManeuverKind>(segments[i].kind);
    m.heading_deg = clusters[member[i]].mean();
    m.start_s = segments[i].start_s;
    m.end_s = segments[i].end_s;
    result.maneuvers.push_back(m);
  }
  std::sort(result.maneuvers.begin(), result.maneuvers.end(),
            [](const Maneuver& a, const Maneuver& b) {
              return a.start_s < b.start_s;
            });

  // Notes for the operator.
  if (skipped_samples > 0) {
    result.notes.push_back(std::to_string(skipped_samples) +
                           " samples in stretches too short to analyse "
                           "(between gaps) were skipped");
  }
  if (result.maneuvers.empty()) {
    result.notes.push_back(
        "no maneuvers found (largest windowed " +
        std::string(attitude ? "attitude" : "field-direction") +
        " deviation RMS " + Fixed(counters.max_rms_deg, 2) +
        " deg; threshold " +
        Fixed(attitude ? options.min_rms_deg : options.min_rms_fluxgate_deg,
              2) +
        " deg)");
  } else {
    std::ostringstream legs;
    legs << result.maneuvers.size() << " maneuvers at " << clusters.size()
         << " heading" << (clusters.size() == 1 ? "" : "s") << ":";
    for (std::size_t c = 0; c < clusters.size(); ++c) {
      legs << (c ? "; " : " ") << Fixed(clusters[c].mean(), 0) << " deg (";
      bool first = true;
      bool have[kKinds] = {false, false, false};
      for (std::size_t i = 0; i < segments.size(); ++i) {
        if (member[i] != c) continue;
        have[segments[i].kind] = true;
      }
      for (int k = 0; k < kKinds; ++k) {
        if (!have[k]) continue;
        legs << (first ? "" : ", ")
             << ManeuverKindName(static_cast<ManeuverKind>(k));
        first = false;
      }
      legs << ")";
    }
    result.notes.push_back(legs.str());
    if (clusters.size() != 4) {
      result.notes.push_back(
          "a compensation box has 4 headings (common practice); found " +
          std::to_string(clusters.size()));
    }
  }
  if (counters.turns > 0) {
    result.notes.push_back(std::to_string(counters.turns) +
                           " oscillating stretches were turns (heading spread "
                           "or turn rate too large) and were ignored");
  }
  if (!attitude && !result.maneuvers.empty()) {
    result.notes.push_back(
        "maneuvers found from the fluxgate alone (no roll/pitch/heading): the "
        "heading is magnetic, and on legs near magnetic north/south (yaw vs "
        "roll) or east/west (yaw vs pitch) the kind is inferred from the "
        "amplitude; pass --segments to state them");
  }
  if (counters.by_amplitude > 0) {
    result.notes.push_back(
        std::to_string(counters.by_amplitude) +
        " maneuver kinds were told apart by amplitude only (typical pitch " +
        Fixed(options.typical_pitch_deg, 0) + ", roll " +
        Fixed(options.typical_roll_deg, 0) + ", yaw " +
        Fixed(options.typical_yaw_deg, 0) +
        " deg); check them or pass --segments");
  }
  return result;
}

std::vector<Maneuver> ReadSegmentsCsv(const std::string& path) {
  std::ifstream in(path);
  if (!in) throw io::InputError(path, 0, 0, "cannot open the segments file");
  // Split a line into fields with their 1-based start columns.
  struct Field {
    std::string text;
    std::size_t column;
  };
  auto split = [](const std::string& line) {
    std::vector<Field> fields;
    std::size_t start = 0;
    while (true) {
      const std::size_t comma = line.find(',', start);
      const std::size_t stop = comma == std::string::npos ? line.size() : comma;
      std::string text = line.substr(start, stop - start);
      std::size_t col = start + 1;
      // Trim blanks and one pair of double quotes.
      std::size_t a = 0, b = text.size();
      while (a < b && std::isspace(static_cast<unsigned char>(text[a]))) ++a;
      while (b > a && std::isspace(static_cast<unsigned char>(text[b - 1])))
        --b;
      if (b - a >= 2 && text[a] == '"' && text[b - 1] == '"') {
        ++a;
        --b;
      }
      fields.push_back({text.substr(a, b - a), col + a});
      if (comma == std::string::npos) break;
      start = comma + 1;
    }
    return fields;
  };
  const char* const kNames[4] = {"start_s", "end_s", "heading_deg", "kind"};
  int index[4] = {-1, -1, -1, -1};
  std::size_t header_columns = 0;
  bool have_header = false;
  std::vector<Maneuver> out;
  std::string line;
  std::size_t line_no = 0;
  while (std::getline(in, line)) {
    ++line_no;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    if (line_no == 1 && line.size() >= 3 &&
        line.compare(0, 3, "\xEF\xBB\xBF") == 0) {
      line.erase(0, 3);  // UTF-8 byte order mark
    }
    const std::size_t first = line.find_first_not_of(" \t");
    if (first == std::string::npos || line[first] == '#') continue;
    const std::vector<Field> fields = split(line);
    if (!have_header) {
      for (std::size_t c = 0; c < fields.size(); ++c) {
        const std::string name = Lower(fields[c].text);
        for (int k = 0; k < 4; ++k) {
          if (name != kNames[k]) continue;
          if (index[k] >= 0) {
            throw io::InputError(path, line_no, fields[c].column,
                                 "column '" + name + "' appears twice");
          }
          index[k] = static_cast<int>(c);
        }
      }
      for (int k = 0; k < 4; ++k) {
        if (index[k] < 0) {
          throw io::InputError(
              path, line_no, 1,
              std::string("expected a header with columns start_s,end_s,"
                          "heading_deg,kind; missing '") +
                  kNames[k] + "'");
        }
      }
      header_columns = fields.size();
      have_header = true;
      continue;
    }
    if (fields.size() != header_columns) {
      throw io::InputError(path, line_no, 1,
                           "expected " + std::to_string(header_columns) +
                               " fields as in the header, found " +
                               std::to_string(fields.size()));
    }
    double values[3] = {0, 0, 0};
    for (int k = 0; k < 3; ++k) {
      const Field& f = fields[index[k]];
      const char* begin = f.text.c_str();
      char* end = nullptr;
      errno = 0;
      const double v = std::strtod(begin, &end);
      if (f.text.empty() || end != begin + f.text.size() || errno == ERANGE ||
          !std::isfinite(v)) {
        throw io::InputError(path, line_no, f.column,
                             std::string("expected a finite number for ") +
                                 kNames[k] + ", found '" + f.text + "'");
      }
      values[k] = v;
    }
    Maneuver m;
    m.start_s = values[0];
    m.end_s = values[1];
    if (!(m.end_s > m.start_s)) {
      throw io::InputError(
          path, line_no, fields[index[1]].column,
          "end_s must be after start_s (" + fields[index[0]].text + ")");
    }
    if (!(values[2] >= -360.0 && values[2] <= 720.0)) {
      throw io::InputError(path, line_no, fields[index[2]].column,
                           "expected heading_deg in -360..720, found '" +
                               fields[index[2]].text + "'");
    }
    m.heading_deg = Wrap360(values[2]);
    const Field& kf = fields[index[3]];
    if (!ParseManeuverKind(kf.text, &m.kind)) {
      throw io::InputError(
          path, line_no, kf.column,
          "expected kind pitch, roll or yaw, found '" + kf.text + "'");
    }
    out.push_back(m);
  }
  if (in.bad()) throw io::InputError(path, line_no, 0, "read error");
  if (!have_header) {
    throw io::InputError(path, 0, 0,
                         "empty segments file: expected a header "
                         "start_s,end_s,heading_deg,kind");
  }
  std::stable_sort(out.begin(), out.end(),
                   [](const Maneuver& a, const Maneuver& b) {
                     return a.start_s < b.start_s;
                   });
  return out;
}

}  // namespace fluxtrim::core
