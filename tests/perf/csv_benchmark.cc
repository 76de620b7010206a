// Throughput of the recording readers and writers on a realistic survey
// recording: time,bx,by,bz,f,roll,pitch,heading,lat,lon,alt at 10 Hz with
// the digits a logger writes (0.1 s, 0.01 nT, 0.01 deg, 1e-7 deg, 0.1 m).
// Bytes per second are of the CSV text (or of the .ftrec file), per second
// of process CPU time (reading a file from the page cache is system time,
// which counts): on a shared, loaded machine wall time says little.
// Goals (single core, Release): parse >= 200 MB/s, write >= 100 MB/s.
//
//   build/tests/csv_benchmark [--benchmark_filter=Csv]

#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <memory>
#include <sstream>
#include <streambuf>
#include <string>

#include <benchmark/benchmark.h>

#include "io/csv.h"
#include "io/frames.h"
#include "io/table.h"

namespace fluxtrim::io {
namespace {

// 200 000 samples: 5.5 hours at 10 Hz, about 19 MB of CSV.
constexpr std::size_t kRows = 200000;
constexpr std::size_t kChunkRows = 1 << 16;

double Round(double v, double step) { return std::round(v / step) * step; }

const Table& Recording() {
  static const Table table = [] {
    Table t({{"time", "s", ""},
             {"bx", "nT", ""},
             {"by", "nT", ""},
             {"bz", "nT", ""},
             {"f", "nT", ""},
             {"roll", "deg", ""},
             {"pitch", "deg", ""},
             {"heading", "deg", ""},
             {"lat", "deg", ""},
             {"lon", "deg", ""},
             {"alt", "m", ""}});
    for (std::size_t i = 0; i < kRows; ++i) {
      const double s = 0.1 * static_cast<double>(i);
      const double heading = std::fmod(90.0 + 0.02 * s, 360.0);
      t.Column("time").push_back(Round(35012.3 + s, 0.1));
      t.Column("bx").push_back(Round(18234.51 + 120 * std::sin(0.3 * s), 0.01));
      t.Column("by").push_back(Round(-2301.07 + 80 * std::cos(0.2 * s), 0.01));
      t.Column("bz").push_back(Round(47811.92 + 40 * std::sin(0.1 * s), 0.01));
      t.Column("f").push_back(Round(51234.77 + 3 * std::sin(0.05 * s), 0.01));
      t.Column("roll").push_back(Round(5 * std::sin(0.5 * s), 0.01));
      t.Column("pitch").push_back(Round(2 * std::sin(0.4 * s), 0.01));
      t.Column("heading").push_back(Round(heading, 0.01));
      t.Column("lat").push_back(Round(-31.9523417 - 1e-5 * s, 1e-7));
      t.Column("lon").push_back(Round(115.8612345 + 2e-5 * s, 1e-7));
      t.Column("alt").push_back(Round(2743.2 + 10 * std::sin(0.01 * s), 0.1));
    }
    return t;
  }();
  return table;
}

std::string TempPath(const char* name) {
  return "/tmp/fluxtrim_csv_benchmark_" + std::to_string(::getpid()) + "_" +
         name;
}

// A file holding the recording, written once, removed at exit.
struct File {
  explicit File(const char* name, bool frames) : path(TempPath(name)) {
    if (frames) {
      FramesWriter writer(path, Recording().Schema());
      writer.Write(Recording());
      writer.Close();
    } else {
      CsvWriter writer(path, Recording().Schema());
      writer.Write(Recording());
      writer.Close();
    }
    std::ifstream in(path, std::ios::binary | std::ios::ate);
    bytes = static_cast<std::size_t>(in.tellg());
  }
  ~File() { std::remove(path.c_str()); }
  std::string path;
  std::size_t bytes = 0;
};

const File& CsvFile() {
  static const File file("recording.csv", false);
  return file;
}

const File& FramesFile() {
  static const File file("recording.ftrec", true);
  return file;
}

// Counts bytes and throws them away: the cost of formatting alone.
class NullBuf : public std::streambuf {
 protected:
  std::streamsize xsputn(const char*, std::streamsize n) override { return n; }
  int_type overflow(int_type c) override { return c; }
};

template <typename Reader>
void ReadFile(benchmark::State& state, const File& file) {
  std::size_t rows = 0;
  for (auto _ : state) {
    Reader reader(file.path);
    Table chunk;
    rows = 0;
    std::size_t n;
    while ((n = reader.ReadChunk(&chunk, kChunkRows)) > 0) rows += n;
    benchmark::DoNotOptimize(chunk);
  }
  if (rows != kRows) state.SkipWithError("wrong row count");
  state.SetBytesProcessed(static_cast<std::int64_t>(state.iterations()) *
                          static_cast<std::int64_t>(file.bytes));
  state.counters["rows/s"] = benchmark::Counter(
      static_cast<double>(state.iterations()) * kRows,
      benchmark::Counter::kIsRate);
}

void BM_CsvParseFile(benchmark::State& state) {
  ReadFile<CsvReader>(state, CsvFile());
}
BENCHMARK(BM_CsvParseFile)->Unit(benchmark::kMillisecond);

void BM_CsvParseMemory(benchmark::State& state) {
  std::ifstream in(CsvFile().path, std::ios::binary);
  std::stringstream s;
  s << in.rdbuf();
  const std::string text = s.str();
  for (auto _ : state) {
    std::istringstream stream(text);
    CsvReader reader(stream, "memory.csv");
    Table chunk;
    while (reader.ReadChunk(&chunk, kChunkRows) > 0) {
    }
    benchmark::DoNotOptimize(chunk);
  }
  state.SetBytesProcessed(static_cast<std::int64_t>(state.iterations()) *
                          static_cast<std::int64_t>(text.size()));
}
BENCHMARK(BM_CsvParseMemory)->Unit(benchmark::kMillisecond);

void BM_CsvWriteWholeTableToFile(benchmark::State& state) {
  const std::string path = TempPath("written.csv");
  for (auto _ : state) {
    CsvWriter writer(path, Recording().Schema());
    writer.Write(Recording());
    writer.Close();
  }
  std::remove(path.c_str());
  state.SetBytesProcessed(static_cast<std::int64_t>(state.iterations()) *
                          static_cast<std::int64_t>(CsvFile().bytes));
}
BENCHMARK(BM_CsvWriteWholeTableToFile)
    ->Unit(benchmark::kMillisecond);

void BM_CsvFormatOnly(benchmark::State& state) {
  NullBuf null;
  std::ostream out(&null);
  for (auto _ : state) {
    CsvWriter writer(out, "null.csv", Recording().Schema());
    writer.Write(Recording());
    writer.Close();
  }
  state.SetBytesProcessed(static_cast<std::int64_t>(state.iterations()) *
                          static_cast<std::int64_t>(CsvFile().bytes));
}
BENCHMARK(BM_CsvFormatOnly)->Unit(benchmark::kMillisecond);

// For comparison: the same recording as protobuf frames.
void BM_FramesParseFile(benchmark::State& state) {
  ReadFile<FramesReader>(state, FramesFile());
}
BENCHMARK(BM_FramesParseFile)->Unit(benchmark::kMillisecond);

void BM_FramesWriteFile(benchmark::State& state) {
  const std::string path = TempPath("written.ftrec");
  for (auto _ : state) {
    FramesWriter writer(path, Recording().Schema());
    writer.Write(Recording());
    writer.Close();
  }
  std::remove(path.c_str());
  state.SetBytesProcessed(static_cast<std::int64_t>(state.iterations()) *
                          static_cast<std::int64_t>(FramesFile().bytes));
}
BENCHMARK(BM_FramesWriteFile)->Unit(benchmark::kMillisecond);

}  // namespace
}  // namespace fluxtrim::io

BENCHMARK_MAIN();
