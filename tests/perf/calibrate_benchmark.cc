// Time of `calibrate` on large recordings (goal: 1 million samples in under
// 2 s for the scalar calibration). Synthetic data: a tumbling sensor in a
// fixed 50,000 nT field, the forward model of models/fluxgate_sensor.h,
// 0.2 nT noise. Run: build/tests/calibrate_benchmark.

#include <cmath>
#include <random>

#include <benchmark/benchmark.h>

#include "models/fluxgate_sensor.h"
#include "src/core/calibrate.h"

namespace {

using fluxtrim::core::Calibrate;
using fluxtrim::core::CalibrateOptions;
using fluxtrim::core::CalibrateResult;

constexpr double kDeg = 3.14159265358979323846 / 180.0;

fluxtrim::io::Table MakeTable(std::size_t n, bool attitude) {
  fluxtrim::models::SensorCalibration c;
  c.gains[0] = 1.02;
  c.gains[1] = 0.98;
  c.offsets_nT[0] = 40;
  c.offsets_nT[2] = -25;
  c.nonorthogonality_rad[0] = 0.4 * kDeg;
  c.nonorthogonality_rad[2] = -0.3 * kDeg;
  std::vector<fluxtrim::io::ChannelInfo> schema = {
      {"bx", "nT", ""}, {"by", "nT", ""}, {"bz", "nT", ""}, {"f", "nT", ""}};
  if (attitude) {
    for (const char* name : {"roll", "pitch", "heading", "lat", "lon", "alt"}) {
      schema.push_back({name, "", ""});
    }
  }
  fluxtrim::io::Table t(schema);
  for (std::size_t k = 0; k < t.cols(); ++k) t.channel(k).values.resize(n);
  std::mt19937 rng(1);
  std::normal_distribution<double> g(0.0, 1.0);
  for (std::size_t i = 0; i < n; ++i) {
    // A field of 50,000 nT in a random direction (tumbling sensor).
    double b[3] = {g(rng), g(rng), g(rng)};
    const double norm = std::sqrt(b[0] * b[0] + b[1] * b[1] + b[2] * b[2]);
    for (double& v : b) v *= 50000.0 / norm;
    const auto e = fluxtrim::models::SensorRaw(c, {b[0], b[1], b[2]});
    t.Column("bx")[i] = e.x + 0.2 * g(rng);
    t.Column("by")[i] = e.y + 0.2 * g(rng);
    t.Column("bz")[i] = e.z + 0.2 * g(rng);
    t.Column("f")[i] = 50000.0;
  }
  return t;
}

void BM_CalibrateScalar(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const fluxtrim::io::Table t = MakeTable(n, false);
  CalibrateOptions options;
  double rms = 0;
  for (auto _ : state) {
    const CalibrateResult r = Calibrate(t, options);
    if (!r.summary.accepted()) state.SkipWithError("calibration refused");
    rms = r.summary.residual_rms_after_nt();
    benchmark::DoNotOptimize(r.model.gains[0]);
  }
  state.counters["residual_rms_nT"] = rms;
  state.SetItemsProcessed(static_cast<int64_t>(state.iterations() * n));
}
BENCHMARK(BM_CalibrateScalar)
    ->Arg(10000)
    ->Arg(100000)
    ->Arg(1000000)
    ->Unit(benchmark::kMillisecond)
    ->MeasureProcessCPUTime()  // CPU of every thread (Ceres uses 2)
    ->UseRealTime()
    ->Iterations(1);

}  // namespace

BENCHMARK_MAIN();
