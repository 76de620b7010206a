// fluxtrim calibrate: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddCalibrateCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "calibrate", "Calibrate the fluxgate (gains, offsets, non-orthogonality)", exit_code);
}

}  // namespace fluxtrim::cli
