#pragma once
// Compensation-flight maneuver segmentation: which time spans hold pitch,
// roll or yaw oscillations, and at which heading. These spans feed the
// figure of merit (metrics.h).
//
// A compensation box (common practice): at each of 4 headings (90 deg
// apart), pitch about +-5 deg, roll about +-10 deg, yaw about +-5 deg,
// periods 4-8 s, a few cycles each (20-60 s per maneuver), level flight
// between.

#include <string>
#include <vector>

#include "io/table.h"

namespace fluxtrim::core {

enum class ManeuverKind { kPitch, kRoll, kYaw };

// "pitch", "roll", "yaw".
const char* ManeuverKindName(ManeuverKind kind);
// Case-insensitive inverse of ManeuverKindName; false for anything else.
bool ParseManeuverKind(const std::string& text, ManeuverKind* kind);

struct Maneuver {
  double heading_deg = 0;  // mean heading over the segment, [0, 360)
  ManeuverKind kind = ManeuverKind::kPitch;
  double start_s = 0;      // time of the first sample in the segment (s)
  double end_s = 0;        // time of the last sample in the segment (s)
};

struct ManeuverDetectionOptions {
  // Sliding window for the RMS of each de-meaned angle (s); about one to two
  // periods of the slowest maneuver (8 s).
  double window_s = 8.0;
  // RMS (deg) above which an angle counts as oscillating. A sine of
  // amplitude A has RMS A/sqrt(2): pitch/yaw +-5 deg -> 3.5 deg RMS.
  double min_rms_deg = 1.0;
  // The dominant angle's RMS must exceed each other angle's by this factor,
  // otherwise the sample is left unassigned (turns, mixed motion).
  double dominance_ratio = 1.5;
  // Segments shorter than this (s) are dropped.
  double min_duration_s = 10.0;
  // Same-kind segments separated by less than this gap (s) are merged.
  double merge_gap_s = 4.0;
  // A segment whose heading spread (circular std, deg) exceeds this is a
  // turn, not a yaw maneuver, and is dropped.
  double max_heading_spread_deg = 20.0;
  // Segments whose mean headings are within this tolerance (deg) are given
  // the same cluster heading (circular mean of the cluster).
  double heading_cluster_tol_deg = 30.0;
  // Fluxgate-only path: heading-rate threshold separating turns (deg/s).
  double max_turn_rate_deg_s = 1.0;
};

struct ManeuverDetection {
  std::vector<Maneuver> maneuvers;  // sorted by start_s
  std::string source;               // "attitude" or "fluxgate heading"
  std::vector<std::string> notes;   // human-readable remarks (why, caveats)
};

// Finds maneuvers in a recording. Uses the roll, pitch and heading channels
// (deg) when all three are present; otherwise derives a magnetic heading
// atan2(-by, bx) and a tilt proxy from the fluxgate bx, by, bz (nT, body
// frame x forward, y starboard, z down), assuming near-level flight.
// Requires a "time" channel (s). Throws std::invalid_argument when neither
// path has its channels, or when options are unusable.
ManeuverDetection DetectManeuvers(const io::Table& recording,
                                  const ManeuverDetectionOptions& options = {});

// Reads --segments FILE: CSV with header start_s,end_s,heading_deg,kind
// (columns in any order, case-insensitive; '#' lines and blank lines are
// skipped). kind is pitch|roll|yaw. Throws io::InputError naming the file,
// line and column of the bad value.
std::vector<Maneuver> ReadSegmentsCsv(const std::string& path);

}  // namespace fluxtrim::core
