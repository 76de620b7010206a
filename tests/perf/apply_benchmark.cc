// Throughput of compensation in memory, single core (issue 5): the sample
// engine models::Compensator::Push (16 terms; with 2 aux channels; with a
// scalar-sensor lag and a fluxgate calibration), its term builder
// models::TermEngine::Push, and core::ApplyInMemory on a table.
// Goal: >= 20 million samples/s in memory.
//
//   build-perf/tests/apply_benchmark [--benchmark_filter=Compensator]
//
// The same executable writes the inputs of the whole-process runs
// (tests/perf/run_apply_rss.sh, run_stream_throughput.sh):
//   apply_benchmark --write_model=PATH [--aux=N] [--lag_s=S] [--sensor]
//   apply_benchmark --write_csv=PATH --rows=N [--aux=N]
//   apply_benchmark --write_frames=PATH --rows=N [--aux=N]

#include <algorithm>
#include <cstdint>
#include <cstring>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include <benchmark/benchmark.h>

#include "io/csv.h"
#include "io/frames.h"
#include "io/model_file.h"
#include "models/compensator.h"
#include "models/huge_pages.h"
#include "models/tolles_lawson.h"
#include "src/core/apply.h"
#include "tests/perf/perf_data.h"

namespace fluxtrim::perf {
namespace {

// Input samples kept in memory and replayed; time keeps increasing so the
// engine sees one endless segment (the wrap is one direction jump per 2^16
// samples, which the engine does not treat as a gap).
constexpr std::size_t kReplay = 1u << 16;

struct Inputs {
  std::vector<double> bx, by, bz, f, roll, pitch;
  std::vector<std::vector<double>> aux;  // per sample: aux_count values
};

const Inputs& ReplayInputs(std::size_t aux_count) {
  static std::vector<std::unique_ptr<Inputs>> cache(4);
  std::unique_ptr<Inputs>& slot = cache.at(aux_count);
  if (!slot) {
    const io::Table t = SurveyChunk(0, kReplay, aux_count);
    slot = std::make_unique<Inputs>();
    slot->bx = t.Column("bx");
    slot->by = t.Column("by");
    slot->bz = t.Column("bz");
    slot->f = t.Column("f");
    slot->roll = t.Column("roll");
    slot->pitch = t.Column("pitch");
    slot->aux.resize(kReplay);
    for (std::size_t r = 0; r < kReplay; ++r) {
      for (std::size_t a = 0; a < aux_count; ++a) {
        slot->aux[r].push_back(t.Column("aux_" + std::to_string(a))[r]);
      }
    }
  }
  return *slot;
}

// Args: aux channels, lag in ms, sensor calibration (0/1).
void CompensatorArgs(benchmark::internal::Benchmark* b) {
  b->ArgNames({"aux", "lag_ms", "sensor"})
      ->Args({0, 0, 0})
      ->Args({2, 0, 0})
      ->Args({0, 30, 0})
      ->Args({0, 30, 1})
      ->Args({2, 30, 1});
}

void BM_CompensatorPush(benchmark::State& state) {
  const std::size_t aux_count = static_cast<std::size_t>(state.range(0));
  const double lag_s = 1e-3 * static_cast<double>(state.range(1));
  const bool sensor = state.range(2) != 0;
  const Inputs& in = ReplayInputs(aux_count);
  models::Compensator comp(core::ToCompensatorModel(
      SurveyModel(aux_count, lag_s, sensor), "benchmark"));
  std::vector<models::CompensatedSample> out(
      static_cast<std::size_t>(comp.max_outputs()));
  std::uint64_t i = 0;
  double sum = 0.0;
  for (auto _ : state) {
    const std::size_t r = static_cast<std::size_t>(i & (kReplay - 1));
    const double b[3] = {in.bx[r], in.by[r], in.bz[r]};
    const double time = 35012.3 + 0.1 * static_cast<double>(i);
    const int n = comp.Push(time, b, in.f[r],
                            aux_count ? in.aux[r].data() : nullptr, in.roll[r],
                            in.pitch[r], 20.0, out.data());
    for (int j = 0; j < n; ++j) sum += out[static_cast<std::size_t>(j)].f_comp;
    ++i;
  }
  benchmark::DoNotOptimize(sum);
  state.SetItemsProcessed(state.iterations());
  state.counters["terms"] = static_cast<double>(comp.term_count());
}
BENCHMARK(BM_CompensatorPush)->Apply(CompensatorArgs);

// The term builder alone (direction cosines, derivative, row, dot product).
void BM_TermEnginePush(benchmark::State& state) {
  const std::size_t aux_count = static_cast<std::size_t>(state.range(0));
  const Inputs& in = ReplayInputs(aux_count);
  const proto::CompensationModel model = SurveyModel(aux_count, 0.0, false);
  const models::CompensatorModel cm = core::ToCompensatorModel(model, "bench");
  models::TermEngine engine(cm.engine);
  engine.SetCoefficients(cm.coefficients.data());
  std::vector<models::TermEngine::Output> out(
      static_cast<std::size_t>(engine.max_outputs()));
  std::uint64_t i = 0;
  double sum = 0.0;
  for (auto _ : state) {
    const std::size_t r = static_cast<std::size_t>(i & (kReplay - 1));
    const double b[3] = {in.bx[r], in.by[r], in.bz[r]};
    const int n = engine.Push(35012.3 + 0.1 * static_cast<double>(i), b,
                              in.f[r], aux_count ? in.aux[r].data() : nullptr,
                              out.data());
    for (int j = 0; j < n; ++j) {
      sum += out[static_cast<std::size_t>(j)].interference;
    }
    ++i;
  }
  benchmark::DoNotOptimize(sum);
  state.SetItemsProcessed(state.iterations());
}
BENCHMARK(BM_TermEnginePush)->ArgName("aux")->Arg(0)->Arg(2);

// The same engine fed by blocks of columns (Compensator::PushBlock, as apply
// does): kMaxBlock samples per call. Args as BM_CompensatorPush.
void BM_CompensatorPushBlock(benchmark::State& state) {
  const std::size_t aux_count = static_cast<std::size_t>(state.range(0));
  const double lag_s = 1e-3 * static_cast<double>(state.range(1));
  const bool sensor = state.range(2) != 0;
  const io::Table t = SurveyChunk(0, kReplay, aux_count);
  const std::vector<double>& time = t.Column("time");
  const double *bx = t.Column("bx").data(), *by = t.Column("by").data(),
               *bz = t.Column("bz").data(), *f = t.Column("f").data(),
               *roll = t.Column("roll").data(), *pitch = t.Column("pitch").data();
  std::vector<const double*> aux_start(aux_count), aux_cols(aux_count);
  for (std::size_t a = 0; a < aux_count; ++a) {
    aux_start[a] = t.Column("aux_" + std::to_string(a)).data();
  }
  models::Compensator comp(core::ToCompensatorModel(
      SurveyModel(aux_count, lag_s, sensor), "benchmark"));
  const std::size_t m = comp.max_block_outputs();
  std::vector<double> f_comp(m), f_int(m);
  std::vector<std::uint32_t> flags(m);
  models::CompensatedColumns out;
  out.f_comp = f_comp.data();
  out.f_interference = f_int.data();
  out.flags = flags.data();
  constexpr std::size_t kBlock = models::Compensator::kMaxBlock;
  std::size_t r = 0;
  double offset = 0.0;  // time keeps increasing across replays
  std::vector<double> shifted(kBlock);
  double sum = 0.0;
  for (auto _ : state) {
    for (std::size_t i = 0; i < kBlock; ++i) shifted[i] = time[r + i] + offset;
    models::SampleColumns in;
    in.time = shifted.data();
    in.bx = bx + r;
    in.by = by + r;
    in.bz = bz + r;
    in.f = f + r;
    in.roll_deg = roll + r;
    in.pitch_deg = pitch + r;
    for (std::size_t a = 0; a < aux_count; ++a) aux_cols[a] = aux_start[a] + r;
    in.aux = aux_cols.data();
    const std::size_t n = comp.PushBlock(kBlock, in, out);
    for (std::size_t j = 0; j < n; ++j) sum += f_comp[j];
    r += kBlock;
    if (r + kBlock > kReplay) {
      offset += time[r - 1] - time[0] + 0.1;
      r = 0;
    }
  }
  benchmark::DoNotOptimize(sum);
  state.SetItemsProcessed(state.iterations() * static_cast<std::int64_t>(kBlock));
  state.counters["terms"] = static_cast<double>(comp.term_count());
}
BENCHMARK(BM_CompensatorPushBlock)->Apply(CompensatorArgs);

// ApplyInMemory on a 200 000-sample table (5.5 h at 10 Hz): the engine plus
// the output table (three columns added). Args: aux channels, lag in ms (a
// fitted model nearly always has one). `moved`: the recording is moved in
// (its columns become the output's; the copy made for each iteration and
// the freeing of the output are not timed); otherwise it is copied in.
void RunApplyInMemory(benchmark::State& state, bool moved) {
  const std::size_t aux_count = static_cast<std::size_t>(state.range(0));
  constexpr std::size_t kRows = 200000;
  const io::Table rec = SurveyChunk(0, kRows, aux_count);
  const double lag_s = 1e-3 * static_cast<double>(state.range(1));
  const proto::CompensationModel model = SurveyModel(aux_count, lag_s, false);
  for (auto _ : state) {
    io::Table out;
    if (moved) {
      state.PauseTiming();
      io::Table in = rec;
      state.ResumeTiming();
      out = core::ApplyInMemory(model, std::move(in), "bench");
    } else {
      out = core::ApplyInMemory(model, rec, "bench");
    }
    benchmark::DoNotOptimize(out.channel(out.cols() - 3).values.data());
    if (moved) {
      state.PauseTiming();
      out = io::Table();
      state.ResumeTiming();
    }
  }
  state.SetItemsProcessed(state.iterations() * static_cast<std::int64_t>(kRows));
}
void BM_ApplyInMemory(benchmark::State& state) { RunApplyInMemory(state, false); }
void BM_ApplyInMemoryMoved(benchmark::State& state) { RunApplyInMemory(state, true); }
BENCHMARK(BM_ApplyInMemory)
    ->ArgNames({"aux", "lag_ms"})
    ->Args({0, 0})
    ->Args({2, 0})
    ->Args({0, 30})
    ->Unit(benchmark::kMillisecond);
BENCHMARK(BM_ApplyInMemoryMoved)
    ->ArgNames({"aux", "lag_ms"})
    ->Args({0, 0})
    ->Args({2, 0})
    ->Args({0, 30})
    ->Unit(benchmark::kMillisecond);

// --- input writers for the whole-process scripts -------------------------

bool Flag(int argc, char** argv, const char* name, std::string* value) {
  const std::size_t len = std::strlen(name);
  for (int i = 1; i < argc; ++i) {
    if (std::strncmp(argv[i], name, len) == 0) {
      if (argv[i][len] == '=') {
        *value = argv[i] + len + 1;
        return true;
      }
      if (argv[i][len] == '\0') {
        *value = "1";
        return true;
      }
    }
  }
  return false;
}

int WriteInputs(int argc, char** argv) {
  std::string path, value;
  std::size_t aux = 0, rows = 0;
  if (Flag(argc, argv, "--aux", &value)) aux = std::stoul(value);
  if (Flag(argc, argv, "--rows", &value)) rows = std::stoul(value);
  if (Flag(argc, argv, "--write_model", &path)) {
    double lag = 0.0;
    if (Flag(argc, argv, "--lag_s", &value)) lag = std::stod(value);
    const bool sensor = Flag(argc, argv, "--sensor", &value);
    io::WriteModelFile(path, SurveyModel(aux, lag, sensor));
    return 0;
  }
  const bool csv = Flag(argc, argv, "--write_csv", &path);
  if (!csv && !Flag(argc, argv, "--write_frames", &path)) return -1;
  std::unique_ptr<io::RecordingWriter> writer;
  if (csv) {
    writer = std::make_unique<io::CsvWriter>(path, SurveySchema(aux));
  } else {
    writer = std::make_unique<io::FramesWriter>(path, SurveySchema(aux));
  }
  constexpr std::size_t kChunk = 1u << 16;
  for (std::size_t begin = 0; begin < rows; begin += kChunk) {
    writer->Write(SurveyChunk(begin, std::min(kChunk, rows - begin), aux));
  }
  writer->Close();
  return 0;
}

}  // namespace
}  // namespace fluxtrim::perf

int main(int argc, char** argv) {
  const int written = fluxtrim::perf::WriteInputs(argc, argv);
  if (written >= 0) return written;
  fluxtrim::models::ConfigureBatchHeap();  // as the fluxtrim binary does
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return 0;
}
