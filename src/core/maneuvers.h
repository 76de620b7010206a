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
  // Heading of the box leg (deg, [0, 360)): DetectManeuvers gives the
  // circular mean of the heading cluster the segment belongs to, so every
  // maneuver of one leg carries the same value.
  double heading_deg = 0;
  ManeuverKind kind = ManeuverKind::kPitch;
  double start_s = 0;  // start time (s); samples with start_s <= t belong
  double end_s = 0;    // end time (s); samples with t <= end_s belong
};

struct ManeuverDetectionOptions {
  // Sliding window (s) for de-meaning each angle and for its windowed mean
  // square; about one slow maneuver period (8 s). Periods that divide the
  // window are removed exactly from the running mean.
  double window_s = 8.0;
  // Windowed RMS (deg) of the angle deviations above which a sample counts as
  // maneuvering. A sine of amplitude A has RMS A/sqrt(2): pitch/yaw +-5 deg
  // give 3.5 deg. Attitude path.
  double min_rms_deg = 1.0;
  // The same for the fluxgate path, where only the rotation perpendicular to
  // the field is seen (a yaw of A shows as A cos(inclination)).
  double min_rms_fluxgate_deg = 0.5;
  // Share of the windowed deviation energy that one kind's rotation axis
  // must explain; below it the sample is mixed motion and left unassigned.
  double min_share = 0.6;
  // Kinds whose share is within this of the best one cannot be told apart
  // by direction (fluxgate path at cardinal headings: yaw looks like roll on
  // north/south legs and like pitch on east/west legs); the kind whose
  // implied amplitude is nearest its typical amplitude (below) wins.
  double ambiguity_share = 0.15;
  // Typical peak amplitudes of a compensation box (deg; common practice).
  double typical_pitch_deg = 5.0;
  double typical_roll_deg = 10.0;
  double typical_yaw_deg = 5.0;
  // Label runs shorter than this (s) are treated as unassigned before
  // merging (flicker at transitions).
  double min_blip_s = 2.0;
  // Same-kind runs separated by at most this many seconds are merged.
  double merge_gap_s = 4.0;
  // Segments shorter than this (s), after trimming, are dropped.
  double min_duration_s = 10.0;
  // A segment whose heading spread (circular standard deviation, deg)
  // exceeds this, or whose mean turn rate (deg/s) exceeds
  // max_turn_rate_deg_s, is a turn rather than a maneuver and is dropped.
  double max_heading_spread_deg = 20.0;
  double max_turn_rate_deg_s = 1.0;
  // Segments whose mean headings are within this (deg) share one cluster
  // heading (circular mean of the cluster).
  double heading_cluster_tol_deg = 30.0;
  // A time step larger than this many median steps splits the recording
  // into pieces that are analysed separately.
  double gap_factor = 3.0;

  bool IsValid(std::string* error) const;
};

struct ManeuverDetection {
  std::vector<Maneuver> maneuvers;  // sorted by start_s
  std::string source;               // "attitude" or "fluxgate heading"
  std::vector<std::string> notes;   // human-readable remarks (why, caveats)
};

// Finds maneuvers in a recording (time channel: the table's
// time_channel(), s).
//
// Attitude path (roll, pitch, heading channels in deg all present): each
// angle (heading unwrapped) minus its running mean over window_s gives a
// deviation vector w = (roll, pitch, yaw) in deg.
// Fluxgate path (otherwise; bx, by, bz in nT, body frame x forward, y
// starboard, z down): with c = B/|B| and c0 its running mean (normalised),
// the smallest body rotation that moves c0 to c is w = (c - c0) x c0 (rad,
// reported in deg); a rotation about the field direction is invisible. The
// rotation axes of roll, pitch and yaw (body x, y, z, assuming near-level
// flight) seen in that plane are x - c0 c0_x, etc. Heading is the magnetic
// heading atan2(-c0_y, c0_x) of the running mean, which is free of the
// tilt-induced swing of the instantaneous value. Limits of this path: on
// legs along magnetic north/south a yaw moves the field like a roll, on
// east/west legs like a pitch; the kind then comes from the amplitude
// (typical_*_deg), which fails when the two look alike (e.g. pitch and yaw
// of equal amplitude at 45 deg inclination); such segments are counted in
// the notes. With --segments the operator states them instead.
// Both paths: the windowed second moments of w give, for each kind, the
// share of the deviation energy along its axis; each sample takes the
// dominant kind (see the options), runs of one kind are merged and trimmed
// to where the kind's windowed mean square crosses half its plateau (for a
// steady oscillation that starts abruptly this is the true start, because
// the running mean of a step crosses half-way at the step), turns are
// dropped, and headings are clustered into box legs.
// Throws std::invalid_argument when neither path has its channels, when
// there is no time channel, or when options are unusable.
ManeuverDetection DetectManeuvers(const io::Table& recording,
                                  const ManeuverDetectionOptions& options = {});

// Reads --segments FILE: CSV with header start_s,end_s,heading_deg,kind
// (columns in any order, case-insensitive; '#' lines and blank lines are
// skipped). kind is pitch|roll|yaw. Throws io::InputError naming the file,
// line and column of the bad value.
std::vector<Maneuver> ReadSegmentsCsv(const std::string& path);

}  // namespace fluxtrim::core
