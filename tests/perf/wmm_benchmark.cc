// Throughput of the WMM synthesis: the simulator evaluates the field once
// per sample, so Field() calls per second bound how fast flights simulate.
// Run: build-*/tests/wmm_benchmark (items_per_second = evaluations/s).

#include <benchmark/benchmark.h>

#include "models/legendre.h"
#include "models/wmm.h"

namespace {

using fluxtrim::models::MagneticModel;

// A track that changes position, height and time every call, as a flight
// does (no caching can help).
void BM_WmmField(benchmark::State& state) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  double lat = -60.0, lon = -170.0, alt = 0.0, year = 2025.0;
  for (auto _ : state) {
    benchmark::DoNotOptimize(wmm.Field(lat, lon, alt, year));
    lat += 0.0137;
    if (lat > 60.0) lat = -60.0;
    lon += 0.0291;
    if (lon > 170.0) lon = -170.0;
    alt += 1.0;
    if (alt > 5000.0) alt = 0.0;
    year += 1e-7;
  }
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_WmmField);

void BM_WmmFieldWithRate(benchmark::State& state) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  double lat = -60.0;
  for (auto _ : state) {
    benchmark::DoNotOptimize(wmm.FieldWithRate(lat, 20.0, 1000.0, 2026.0));
    lat += 0.0137;
    if (lat > 60.0) lat = -60.0;
  }
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_WmmFieldWithRate);

// The Legendre recursion alone, degree 12.
void BM_SchmidtLegendreDegree12(benchmark::State& state) {
  const fluxtrim::models::SchmidtLegendre legendre(12);
  double p[91], dp[91], q[91];
  double c = 0.3, s = 0.9539392014169456;
  for (auto _ : state) {
    legendre.Compute(c, s, p, dp, q);
    benchmark::DoNotOptimize(p[90] + dp[90] + q[90]);
    benchmark::ClobberMemory();
  }
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_SchmidtLegendreDegree12);

}  // namespace

BENCHMARK_MAIN();
