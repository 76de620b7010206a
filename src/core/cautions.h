#pragma once
// Safety cautions shown by commands and reports (design section 8).

namespace fluxtrim::core {

// Calibration maneuvers and flights.
extern const char* const kFlightCaution;
// Ground-vehicle searches for unexploded ordnance.
extern const char* const kOrdnanceCaution;

}  // namespace fluxtrim::core
