// Fit time (core::FitModel, everything after reading the file: terms,
// band-pass, maneuver detection, determination, GCV, lag search and
// refinement, Ceres solve and covariance, metrics, cross-validation) for a
// simulated 20-minute compensation box at 10 Hz and at 100 Hz, and for
// about one million samples (the 100 Hz box repeated end to end).
//
// The default runs maneuver detection on a second thread (FitOptions::
// threads = 2); the *OneThread variants keep everything on one core. CPU
// time counts both threads. Like the fluxtrim binary, the benchmark starts
// with models::ConfigureBatchHeap() (large blocks kept and reused on a heap
// advised for huge pages).
//
//   build-*/tests/fit_benchmark --benchmark_min_time=1
#include <benchmark/benchmark.h>

#include <memory>
#include <string>

#include "models/huge_pages.h"
#include "src/core/fit.h"
#include "src/core/scenario.h"
#include "tests/core/fit_test_util.h"

namespace fluxtrim::core {
namespace {

// About 20 minutes: nine cycles per maneuver and 30 s of settling.
const io::Table& Box(double rate_hz) {
  static std::unique_ptr<io::Table> box10, box100;
  std::unique_ptr<io::Table>& slot = rate_hz < 50 ? box10 : box100;
  if (!slot) {
    testing::BoxScenario s;
    s.rate_hz = rate_hz;
    s.cycles = 9;
    s.settle_s = 30.0;
    slot = std::make_unique<io::Table>(
        SimulateScenarioText(testing::AircraftBoxText(s), "bench").recording);
  }
  return *slot;
}

// The 100 Hz box repeated until it holds at least 1,000,000 samples (time
// continues; the join is a 1 s gap).
const io::Table& Million() {
  static std::unique_ptr<io::Table> table;
  if (!table) {
    const io::Table& box = Box(100.0);
    table = std::make_unique<io::Table>(box);
    const auto& t = box.Column("time");
    const double span = t.back() - t.front() + 1.0;
    for (int copy = 1; table->rows() < 1000000; ++copy) {
      io::Table next = box;
      for (double& v : next.Column("time")) v += copy * span;
      table->Append(next);
    }
  }
  return *table;
}

void Run(benchmark::State& state, const io::Table& table, int threads = 2) {
  FitOptions options;
  options.threads = threads;
  for (auto _ : state) {
    FitResult fit = FitModel(table, options);
    if (!fit.usable) state.SkipWithError(fit.message.c_str());
    benchmark::DoNotOptimize(fit.values.data());
  }
  const auto& t = table.Column("time");
  state.counters["samples"] = static_cast<double>(table.rows());
  state.counters["duration_s"] = t.back() - t.front();
  state.SetItemsProcessed(static_cast<std::int64_t>(state.iterations()) *
                          static_cast<std::int64_t>(table.rows()));
}

void BM_FitBox10Hz(benchmark::State& state) { Run(state, Box(10.0)); }
void BM_FitBox100Hz(benchmark::State& state) { Run(state, Box(100.0)); }
void BM_FitMillionSamples(benchmark::State& state) { Run(state, Million()); }
// Everything on one thread (FitOptions::threads = 1): the single-core figure.
void BM_FitBox100HzOneThread(benchmark::State& state) { Run(state, Box(100.0), 1); }
void BM_FitMillionSamplesOneThread(benchmark::State& state) {
  Run(state, Million(), 1);
}

BENCHMARK(BM_FitBox10Hz)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_FitBox100Hz)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_FitMillionSamples)->Unit(benchmark::kMillisecond)->UseRealTime()->Iterations(3);
BENCHMARK(BM_FitBox100HzOneThread)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_FitMillionSamplesOneThread)->Unit(benchmark::kMillisecond)->UseRealTime()->Iterations(3);

}  // namespace
}  // namespace fluxtrim::core

int main(int argc, char** argv) {
  fluxtrim::models::ConfigureBatchHeap();
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return 0;
}
