// fluxtrim: removes the magnetic interference of a platform from
// magnetometer data. Entry point; every subcommand lives in its own file.

#include <cstdio>
#include <exception>
#include <iostream>

#include <CLI/CLI.hpp>

#include "fluxtrim/version.h"
#include "io/error.h"
#include "models/huge_pages.h"
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddPendingCommand(CLI::App& app, const char* name, const char* summary,
                       int* exit_code) {
  CLI::App* sub = app.add_subcommand(name, summary);
  sub->allow_extras();
  sub->callback([name, exit_code] {
    std::cerr << "fluxtrim " << name << ": not yet implemented\n";
    *exit_code = 2;
  });
}

}  // namespace fluxtrim::cli

int main(int argc, char** argv) {
  using namespace fluxtrim;
  models::ConfigureBatchHeap();
  CLI::App app{
      "fluxtrim " FLUXTRIM_VERSION
      ": removes the magnetic interference of a platform from magnetometer "
      "data (Tolles-Lawson compensation, fluxgate calibration, real-time "
      "stream)."};
  app.set_version_flag("--version", std::string("fluxtrim ") + FLUXTRIM_VERSION);
  app.require_subcommand(1);
  int exit_code = 0;
  cli::AddInspectCommand(app, &exit_code);
  cli::AddFitCommand(app, &exit_code);
  cli::AddApplyCommand(app, &exit_code);
  cli::AddCalibrateCommand(app, &exit_code);
  cli::AddStreamCommand(app, &exit_code);
  cli::AddSimulateCommand(app, &exit_code);
  cli::AddFieldCommand(app, &exit_code);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int code = app.exit(e);
    return code == 0 ? 0 : 2;
  } catch (const io::InputError& e) {
    std::cerr << "error: " << e.what() << "\n";
    return 1;
  } catch (const std::exception& e) {
    std::cerr << "error: " << e.what() << "\n";
    return 1;
  }
  return exit_code;
}
