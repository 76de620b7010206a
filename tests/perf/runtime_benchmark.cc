// The embeddable runtime (issue 7): ftr_push throughput, and the compute
// latency of one ftr_push, i.e. what a sample waits beyond the fixed
// k-sample delay of the centred derivative (k = 2 at 10 Hz: 200 ms).
// Goal: p99 <= 20 us per push.
//
//   build-perf/tests/runtime_benchmark [--benchmark_filter=Latency]
//
// BM_FtrPushLatency times 1 000 000 pushes one by one with
// std::chrono::steady_clock around the call (the caller's view, clock
// overhead included) and with ftr_last_push_ns (the engine's own view), and
// reports the percentiles as counters (nanoseconds).

#include <algorithm>
#include <chrono>
#include <cstdint>
#include <string>
#include <vector>

#include <benchmark/benchmark.h>

#include "io/model_file.h"
#include "src/runtime/fluxtrim_runtime.h"
#include "tests/perf/perf_data.h"

namespace fluxtrim::perf {
namespace {

constexpr std::size_t kReplay = 1u << 16;

struct Replay {
  explicit Replay(std::size_t aux_count)
      : table(SurveyChunk(0, kReplay, aux_count)), aux(kReplay) {
    for (std::size_t r = 0; r < kReplay; ++r) {
      for (std::size_t a = 0; a < aux_count; ++a) {
        aux[r].push_back(table.Column("aux_" + std::to_string(a))[r]);
      }
    }
  }
  // Sample i of an endless survey (time keeps increasing).
  ftr_sample Sample(std::uint64_t i) const {
    const std::size_t r = static_cast<std::size_t>(i & (kReplay - 1));
    ftr_sample s;
    s.time = 35012.3 + 0.1 * static_cast<double>(i);
    s.bx = table.channel(1).values[r];
    s.by = table.channel(2).values[r];
    s.bz = table.channel(3).values[r];
    s.f = table.channel(4).values[r];
    s.aux = aux[r].empty() ? nullptr : aux[r].data();
    s.roll_deg = table.channel(5).values[r];
    s.pitch_deg = table.channel(6).values[r];
    s.temp_c = 20.0;
    return s;
  }
  io::Table table;
  std::vector<std::vector<double>> aux;
};

runtime::Engine OpenEngine(std::size_t aux_count, double lag_s, bool sensor) {
  return runtime::Engine::FromText(
      io::FormatModelText(SurveyModel(aux_count, lag_s, sensor)));
}

// Args: aux channels, lag in ms, sensor calibration (0/1).
void BM_FtrPush(benchmark::State& state) {
  const std::size_t aux_count = static_cast<std::size_t>(state.range(0));
  const Replay replay(aux_count);
  runtime::Engine engine = OpenEngine(
      aux_count, 1e-3 * static_cast<double>(state.range(1)), state.range(2) != 0);
  std::vector<ftr_output> out(static_cast<std::size_t>(engine.max_outputs()));
  const int size = static_cast<int>(out.size());
  std::uint64_t i = 0;
  double sum = 0.0;
  for (auto _ : state) {
    const ftr_sample s = replay.Sample(i++);
    const int n = engine.Push(s, out.data(), size);
    for (int j = 0; j < n; ++j) sum += out[static_cast<std::size_t>(j)].f_comp;
  }
  benchmark::DoNotOptimize(sum);
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_FtrPush)
    ->ArgNames({"aux", "lag_ms", "sensor"})
    ->Args({0, 0, 0})
    ->Args({2, 30, 1});

double Percentile(std::vector<std::int64_t>* v, double p) {
  const std::size_t k = std::min(
      v->size() - 1, static_cast<std::size_t>(p * static_cast<double>(v->size())));
  std::nth_element(v->begin(), v->begin() + static_cast<std::ptrdiff_t>(k),
                   v->end());
  return static_cast<double>((*v)[k]);
}

void BM_FtrPushLatency(benchmark::State& state) {
  constexpr std::size_t kPushes = 1000000;
  const std::size_t aux_count = static_cast<std::size_t>(state.range(0));
  const Replay replay(aux_count);
  std::vector<std::int64_t> caller(kPushes), engine_ns(kPushes);
  for (auto _ : state) {
    runtime::Engine engine =
        OpenEngine(aux_count, 1e-3 * static_cast<double>(state.range(1)),
                   state.range(2) != 0);
    std::vector<ftr_output> out(static_cast<std::size_t>(engine.max_outputs()));
    const int size = static_cast<int>(out.size());
    double sum = 0.0;
    for (std::size_t i = 0; i < kPushes; ++i) {
      const ftr_sample s = replay.Sample(i);
      const auto start = std::chrono::steady_clock::now();
      const int n = engine.Push(s, out.data(), size);
      const auto stop = std::chrono::steady_clock::now();
      caller[i] =
          std::chrono::duration_cast<std::chrono::nanoseconds>(stop - start)
              .count();
      engine_ns[i] = ftr_last_push_ns(engine.get());
      for (int j = 0; j < n; ++j) sum += out[static_cast<std::size_t>(j)].f_comp;
    }
    benchmark::DoNotOptimize(sum);
    state.counters["latency_samples"] = engine.latency_samples();
  }
  state.counters["p50_ns"] = Percentile(&caller, 0.50);
  state.counters["p99_ns"] = Percentile(&caller, 0.99);
  state.counters["p999_ns"] = Percentile(&caller, 0.999);
  state.counters["max_ns"] =
      static_cast<double>(*std::max_element(caller.begin(), caller.end()));
  state.counters["engine_p50_ns"] = Percentile(&engine_ns, 0.50);
  state.counters["engine_p99_ns"] = Percentile(&engine_ns, 0.99);
  state.counters["engine_max_ns"] =
      static_cast<double>(*std::max_element(engine_ns.begin(), engine_ns.end()));
  state.counters["over_20us"] = static_cast<double>(
      std::count_if(caller.begin(), caller.end(),
                    [](std::int64_t ns) { return ns > 20000; }));
  state.SetItemsProcessed(state.iterations() *
                          static_cast<std::int64_t>(kPushes));
}
BENCHMARK(BM_FtrPushLatency)
    ->ArgNames({"aux", "lag_ms", "sensor"})
    ->Args({0, 0, 0})
    ->Args({2, 30, 1})
    ->Iterations(1)
    ->Unit(benchmark::kMillisecond);

}  // namespace
}  // namespace fluxtrim::perf

BENCHMARK_MAIN();
