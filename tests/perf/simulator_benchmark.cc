// Throughput of the platform simulator (items_per_second = simulated
// samples per second).
//   BM_SimulateBox         models::Simulate, an aircraft compensation box
//                          with turbulence, geology and diurnal variation
//   BM_SimulateDroneGrid   a drone grid with a current channel and dipoles
//   BM_EvaluateOneInstant  PlatformSimulator::Evaluate (physics of one
//                          instant: plan, track, 3 WMM calls, geology)
//   BM_SimulateDemoBoxScenario  scenario text -> tables (flights/demo_box)
// Run: build-*/tests/simulator_benchmark

#include <benchmark/benchmark.h>

#include <fstream>
#include <sstream>
#include <string>

#include "models/simulator.h"
#include "src/core/scenario.h"

namespace {

using namespace fluxtrim::models;

constexpr double kDeg = 3.14159265358979323846 / 180.0;

SimulatorConfig BoxConfig() {
  SimulatorConfig c;
  c.sample_rate_hz = 10.0;
  c.start_time_s = 1800.0;
  c.decimal_year_at_midnight = 2025.45;
  c.start_lat_deg = -32.4;
  c.start_lon_deg = 142.0;
  c.start_alt_m = 2800.0;
  c.plan = BuildCompensationBox(CompensationBoxOptions());
  c.turbulence.roll_rms = 0.3 * kDeg;
  c.turbulence.pitch_rms = 0.2 * kDeg;
  c.turbulence.heading_rms = 0.1 * kDeg;
  c.platform.permanent_nT = {14.0, -9.0, 21.0};
  c.platform.induced.m[0][0] = 3e-4;
  c.platform.eddy_s.m[0][0] = 5e-4;
  c.scalar.noise_rms_nT = 0.005;
  c.fluxgate.noise_rms_nT = 0.05;
  c.environment.geology.rms_nT = 80.0;
  c.environment.geology.reference_alt_m = 250.0;
  c.environment.diurnal.amplitude_nT = 15.0;
  c.environment.diurnal.micropulsation_rms_nT = 0.05;
  return c;
}

SimulatorConfig DroneGridConfig() {
  SimulatorConfig c = BoxConfig();
  SurveyLinesOptions lines;
  lines.line_count = 10;
  lines.line_length_m = 200.0;
  lines.line_spacing_m = 10.0;
  lines.speed_mps = 5.0;
  lines.turn = {45.0 * kDeg, 2.0, false, true};
  c.plan = BuildSurveyLines(lines);
  c.start_alt_m = 270.0;
  c.scalar.present = false;
  c.environment.geology.min_wavelength_m = 20.0;
  c.environment.geology.max_wavelength_m = 400.0;
  c.environment.geology.reference_alt_m = 240.0;
  CurrentSource motor;
  motor.name = "i_motor";
  motor.coupling_nT_per_A = {0.22, -0.28, 0.19};
  motor.base_A = 18.0;
  motor.fluctuation_rms_A = 1.5;
  c.platform.currents.push_back(motor);
  c.environment.dipoles.push_back({60.0, 35.0, 238.0, {100.0, 20.0, -400.0}});
  return c;
}

void BM_SimulateBox(benchmark::State& state) {
  const SimulatorConfig config = BoxConfig();
  std::size_t samples = 0;
  for (auto _ : state) {
    const SimulationResult r = Simulate(config);
    samples += r.time_s.size();
    benchmark::DoNotOptimize(r.scalar_nT.data());
  }
  state.SetItemsProcessed(static_cast<int64_t>(samples));
}
BENCHMARK(BM_SimulateBox)->Unit(benchmark::kMillisecond);

void BM_SimulateDroneGrid(benchmark::State& state) {
  const SimulatorConfig config = DroneGridConfig();
  std::size_t samples = 0;
  for (auto _ : state) {
    const SimulationResult r = Simulate(config);
    samples += r.time_s.size();
    benchmark::DoNotOptimize(r.fluxgate_nT.data());
  }
  state.SetItemsProcessed(static_cast<int64_t>(samples));
}
BENCHMARK(BM_SimulateDroneGrid)->Unit(benchmark::kMillisecond);

void BM_EvaluateOneInstant(benchmark::State& state) {
  const PlatformSimulator sim(BoxConfig());
  double t = 0.0;
  const double end = sim.config().plan.duration_s();
  for (auto _ : state) {
    benchmark::DoNotOptimize(sim.Evaluate(t).total_body);
    t += 0.0937;
    if (t > end) t = 0.0;
  }
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_EvaluateOneInstant);

void BM_SimulateDemoBoxScenario(benchmark::State& state) {
  std::ifstream in(std::string(FLUXTRIM_SOURCE_DIR) +
                   "/flights/demo_box.scenario");
  std::stringstream text;
  text << in.rdbuf();
  std::size_t samples = 0;
  for (auto _ : state) {
    const fluxtrim::core::SimulatedFlight flight =
        fluxtrim::core::SimulateScenarioText(text.str(), "demo_box.scenario");
    samples += flight.recording.rows();
  }
  state.SetItemsProcessed(static_cast<int64_t>(samples));
}
BENCHMARK(BM_SimulateDemoBoxScenario)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
