#include "src/core/cautions.h"

namespace fluxtrim::core {

const char* const kFlightCaution =
    "Caution: compensation and calibration maneuvers are flown by the pilot "
    "in command within the aircraft flight manual and the local aviation "
    "rules; drone flights follow the local drone regulations.";

const char* const kOrdnanceCaution =
    "Caution: compensated data from a ground-vehicle search for unexploded "
    "ordnance does not declare ground safe; clearance is for licensed "
    "practice under local rules.";

}  // namespace fluxtrim::core
