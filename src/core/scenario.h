#pragma once
// Scenario files -> simulated flights.
//
// A scenario is a protobuf text-format file (schema: io/proto/scenario.proto)
// describing a platform (permanent, induced and eddy fields, current
// channels), its sensors (fluxgate errors, scalar sensor, noise), the place
// and date, the environment (WMM2025 main field, geology, diurnal variation,
// buried dipoles) and a maneuver plan (compensation box, survey lines, drone
// rotations, ground-vehicle loop). SimulateScenario* runs the physics of
// models/simulator.h and returns the recording a real system would have
// logged plus the truth behind it.
//
// Recording channels (in this order; units in ChannelInfo::unit):
//   time               s, seconds after 00:00 UTC of the scenario's date
//   bx by bz           nT, raw fluxgate reading, body axes (x forward,
//                      y starboard, z down), sensor errors and noise included
//   f                  nT, scalar sensor (only when the scenario has one)
//   roll pitch heading deg, logged attitude (3-2-1; heading from true north,
//                      [0, 360)); omitted when the platform logs no attitude
//   lat lon            deg, WGS84
//   alt                m, height above the WGS84 ellipsoid
//   <current name>...  A, one channel per current source, as logged
//   temp               deg C, sensor temperature (only when logged)
// Values are rounded to the logging resolution given in the scenario
// (decimal places), so that the in-memory table equals what a file holds.
//
// Truth channels:
//   time                  s, as in the recording
//   f_interference_true   nT, |ambient + platform| - |ambient| at the scalar
//                         sample time (t - lag), without noise
//   f_ambient             nT, |Earth + geology + diurnal| at t - lag; hence
//                         f = f_ambient + f_interference_true + noise_f +
//                         spike_f (before rounding)
//   f_earth               nT, |WMM2025 main field| at t - lag
//   f_geology             nT, geology + dipoles projected on the main-field
//                         direction at t - lag
//   f_diurnal             nT, diurnal variation at t - lag
//   noise_f               nT, injected white noise of the scalar sensor
//   spike_f               nT, injected spike (0 where none)
//   earth_bx earth_by earth_bz  nT, true main field in the body frame at t
//   maneuver_kind         0 none, 1 pitch, 2 roll, 3 yaw, 4 rotation (drone
//                         calibration rotation)
//   maneuver_heading_deg  deg, reference heading of the maneuver (NaN
//                         outside maneuvers)
// Time-gap dropouts remove the same rows from both tables.

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "io/table.h"

namespace fluxtrim::core {

// One maneuver as flown. Times are values of the `time` channel (s).
struct SegmentTruth {
  double start_s = 0.0;
  double end_s = 0.0;
  double heading_deg = 0.0;  // reference heading, deg from true north
  int kind = 0;              // as maneuver_kind: 1 pitch, 2 roll, 3 yaw, 4 rotation
};

struct SimulatedFlight {
  io::Table recording;
  io::Table truth;
  std::vector<SegmentTruth> segments;  // maneuvers only (kind != 0), in order
  std::string name;                    // scenario name
  std::string description;             // scenario description
  std::string platform_kind;           // "aircraft", "helicopter", "drone",
                                       // "ground_vehicle"
  bool has_scalar_sensor = false;
  double sample_rate_hz = 0.0;         // nominal
  std::uint64_t seed = 0;              // seed actually used
  // Soft problems worth telling the user (e.g. a date outside the WMM's
  // validity); the flight was simulated anyway.
  std::vector<std::string> warnings;
};

struct SimulateOptions {
  // When set, replaces the scenario's `seed` (noise, turbulence, currents,
  // faults; a geology or diurnal `map_seed` given in the file is kept).
  bool override_seed = false;
  std::uint64_t seed = 0;
};

// text: protobuf text format of fluxtrim.proto.Scenario. Errors (syntax,
// unknown fields, values out of range) throw io::InputError naming
// source_name, the line and column, and what was expected.
SimulatedFlight SimulateScenarioText(const std::string& text,
                                     const std::string& source_name);
SimulatedFlight SimulateScenarioText(const std::string& text,
                                     const std::string& source_name,
                                     const SimulateOptions& options);
// Reads the file (io::InputError when it cannot be read) and simulates it.
SimulatedFlight SimulateScenarioFile(const std::string& path);
SimulatedFlight SimulateScenarioFile(const std::string& path,
                                     const SimulateOptions& options);

// The pitch, roll and yaw maneuvers as a CSV for `fit --segments`: header
// "start_s,end_s,heading_deg,kind", one line per maneuver, kind pitch|roll|
// yaw, numbers in their shortest exact form. Rotation segments (drone
// calibration) are not compensation maneuvers and are left out.
std::string FormatSegmentsCsv(const SimulatedFlight& flight);

// What `simulate` prints after a run.
struct FlightSummary {
  double duration_s = 0.0;
  std::size_t samples = 0;
  double sample_rate_hz = 0.0;
  double interference_min_nT = 0.0;  // of f_interference_true
  double interference_max_nT = 0.0;
  // Peak-to-peak of f_interference_true within each maneuver segment
  // (unfiltered), summed over the maneuvers: a FOM-like figure of the
  // uncompensated platform. 0 when the flight has no maneuvers.
  double maneuver_peak_to_peak_sum_nT = 0.0;
  std::size_t maneuvers = 0;
};
FlightSummary SummarizeFlight(const SimulatedFlight& flight);
std::string FormatFlightSummary(const SimulatedFlight& flight,
                                const FlightSummary& summary);

}  // namespace fluxtrim::core
