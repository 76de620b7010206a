// Checks the promise of models/compensator.h and src/runtime/fluxtrim_runtime.h:
// no heap allocation per sample once the engine is built. This executable
// replaces the global operator new/delete (every C++17 form) by versions
// that count calls while a Counting scope is open, then pushes a long survey
// with a gap, a bad sample and attitude beyond the fitted range through
// models::TermEngine, models::Compensator and ftr_push/ftr_flush, and
// asserts the counts stay zero after the first few samples.
//
// What it cannot see: direct malloc calls (none in the engines; the C API's
// own code is C++). The first test shows that the counter does count.

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <limits>
#include <new>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "io/model_file.h"
#include "models/compensator.h"
#include "models/tolles_lawson.h"
#include "src/core/apply.h"
#include "src/runtime/fluxtrim_runtime.h"
#include "tests/perf/perf_data.h"

namespace {

std::atomic<bool> g_counting{false};
std::atomic<long> g_allocations{0};
std::atomic<long> g_deallocations{0};

void* Allocate(std::size_t size, std::size_t alignment, bool nothrow) {
  if (g_counting.load(std::memory_order_relaxed)) {
    g_allocations.fetch_add(1, std::memory_order_relaxed);
  }
  if (size == 0) size = 1;
  void* p = nullptr;
  if (alignment <= alignof(std::max_align_t)) {
    p = std::malloc(size);
  } else if (posix_memalign(&p, alignment, size) != 0) {
    p = nullptr;
  }
  if (!p && !nothrow) throw std::bad_alloc();
  return p;
}

void Deallocate(void* p) {
  if (!p) return;
  if (g_counting.load(std::memory_order_relaxed)) {
    g_deallocations.fetch_add(1, std::memory_order_relaxed);
  }
  std::free(p);
}

}  // namespace

void* operator new(std::size_t n) { return Allocate(n, 0, false); }
void* operator new[](std::size_t n) { return Allocate(n, 0, false); }
void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  return Allocate(n, 0, true);
}
void* operator new[](std::size_t n, const std::nothrow_t&) noexcept {
  return Allocate(n, 0, true);
}
void* operator new(std::size_t n, std::align_val_t a) {
  return Allocate(n, static_cast<std::size_t>(a), false);
}
void* operator new[](std::size_t n, std::align_val_t a) {
  return Allocate(n, static_cast<std::size_t>(a), false);
}
void* operator new(std::size_t n, std::align_val_t a,
                   const std::nothrow_t&) noexcept {
  return Allocate(n, static_cast<std::size_t>(a), true);
}
void* operator new[](std::size_t n, std::align_val_t a,
                     const std::nothrow_t&) noexcept {
  return Allocate(n, static_cast<std::size_t>(a), true);
}
void operator delete(void* p) noexcept { Deallocate(p); }
void operator delete[](void* p) noexcept { Deallocate(p); }
void operator delete(void* p, std::size_t) noexcept { Deallocate(p); }
void operator delete[](void* p, std::size_t) noexcept { Deallocate(p); }
void operator delete(void* p, const std::nothrow_t&) noexcept { Deallocate(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept {
  Deallocate(p);
}
void operator delete(void* p, std::align_val_t) noexcept { Deallocate(p); }
void operator delete[](void* p, std::align_val_t) noexcept { Deallocate(p); }
void operator delete(void* p, std::size_t, std::align_val_t) noexcept {
  Deallocate(p);
}
void operator delete[](void* p, std::size_t, std::align_val_t) noexcept {
  Deallocate(p);
}
void operator delete(void* p, std::align_val_t, const std::nothrow_t&) noexcept {
  Deallocate(p);
}
void operator delete[](void* p, std::align_val_t,
                       const std::nothrow_t&) noexcept {
  Deallocate(p);
}

namespace fluxtrim {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// Pushes before counting starts: the engines allocate only in their
// constructors, so any small number would do; 16 covers a full ring.
constexpr std::size_t kWarmup = 16;
// Samples pushed while counting: 20 000 (33 min at 10 Hz) passes every code
// path many times and keeps the test fast under ASan.
constexpr std::size_t kSamples = 20000;

// Counts allocations and deallocations made while it is alive.
class Counting {
 public:
  Counting() {
    g_allocations = 0;
    g_deallocations = 0;
    g_counting = true;
  }
  ~Counting() { g_counting = false; }
  long Stop() {
    g_counting = false;
    return g_allocations.load() + g_deallocations.load();
  }
};

// The survey inputs with the awkward cases every engine path must meet.
struct Survey {
  explicit Survey(std::size_t aux_count)
      : table(perf::SurveyChunk(0, kWarmup + kSamples, aux_count)) {
    time = table.Column("time");
    for (std::size_t r = 5000; r < time.size(); ++r) time[r] += 4.0;  // gap
    table.Column("bx")[9000] = kNaN;      // dropout: a bad sample
    table.Column("roll")[12000] = 40.0;   // beyond the model's +-25 deg
    for (std::size_t a = 0; a < aux_count; ++a) {
      aux.push_back(table.Column("aux_" + std::to_string(a)));
    }
    aux_row.resize(aux_count);
  }
  const double* Aux(std::size_t r) {
    for (std::size_t a = 0; a < aux.size(); ++a) aux_row[a] = aux[a][r];
    return aux_row.empty() ? nullptr : aux_row.data();
  }
  double B(std::size_t c, std::size_t r) const {
    return table.channel(1 + c).values[r];
  }
  io::Table table;
  std::vector<double> time;
  std::vector<std::vector<double>> aux;
  std::vector<double> aux_row;
};

struct Config {
  std::size_t aux;
  double lag_s;
  bool sensor;
};
const Config kConfigs[] = {{0, 0.0, false}, {2, 0.03, true}, {1, -0.05, false}};

TEST(NoAllocationTest, CounterSeesAnAllocationInsideItsScope) {
  Counting counting;
  std::vector<double>* v = new std::vector<double>(1000, 1.0);
  delete v;
  EXPECT_GE(counting.Stop(), 4);  // the vector, its buffer, and both frees
}

TEST(NoAllocationTest, TermEnginePushAllocatesNothingAfterTheFirstSamples) {
  for (const Config& config : kConfigs) {
    Survey survey(config.aux);
    const models::CompensatorModel cm = core::ToCompensatorModel(
        perf::SurveyModel(config.aux, config.lag_s, config.sensor), "test");
    models::TermEngine engine(cm.engine);
    engine.SetCoefficients(cm.coefficients.data());
    std::vector<models::TermEngine::Output> out(
        static_cast<std::size_t>(engine.max_outputs()));
    const std::vector<double>& f = survey.table.Column("f");
    std::size_t outputs = 0;
    auto push = [&](std::size_t r) {
      const double b[3] = {survey.B(0, r), survey.B(1, r), survey.B(2, r)};
      outputs += static_cast<std::size_t>(
          engine.Push(survey.time[r], b, f[r],
                      survey.Aux(r), out.data()));
    };
    for (std::size_t r = 0; r < kWarmup; ++r) push(r);
    Counting counting;
    for (std::size_t r = kWarmup; r < kWarmup + kSamples; ++r) push(r);
    outputs += static_cast<std::size_t>(engine.Flush(out.data()));
    const long calls = counting.Stop();
    EXPECT_EQ(calls, 0) << "aux " << config.aux;
    EXPECT_EQ(outputs, kWarmup + kSamples);  // the pushes really ran
  }
}

TEST(NoAllocationTest, CompensatorPushAndFlushAllocateNothingAfterTheFirstSamples) {
  for (const Config& config : kConfigs) {
    Survey survey(config.aux);
    models::Compensator comp(core::ToCompensatorModel(
        perf::SurveyModel(config.aux, config.lag_s, config.sensor), "test"));
    std::vector<models::CompensatedSample> out(
        static_cast<std::size_t>(comp.max_outputs()));
    const std::vector<double>& f = survey.table.Column("f");
    const std::vector<double>& roll = survey.table.Column("roll");
    const std::vector<double>& pitch = survey.table.Column("pitch");
    std::size_t outputs = 0, flagged = 0;
    auto take = [&](int n) {
      for (int j = 0; j < n; ++j) {
        if (out[static_cast<std::size_t>(j)].flags) ++flagged;
      }
      outputs += static_cast<std::size_t>(n);
    };
    auto push = [&](std::size_t r) {
      const double b[3] = {survey.B(0, r), survey.B(1, r), survey.B(2, r)};
      take(comp.Push(survey.time[r], b, f[r], survey.Aux(r), roll[r], pitch[r],
                     20.0, out.data()));
    };
    for (std::size_t r = 0; r < kWarmup; ++r) push(r);
    Counting counting;
    for (std::size_t r = kWarmup; r < kWarmup + kSamples; ++r) push(r);
    take(comp.Flush(out.data()));
    const long calls = counting.Stop();
    EXPECT_EQ(calls, 0) << "aux " << config.aux << " lag " << config.lag_s
                        << " sensor " << config.sensor;
    EXPECT_EQ(outputs, kWarmup + kSamples);
    // The gap, the bad sample and the attitude were met (flags raised).
    EXPECT_GT(flagged, 5u);
  }
}

TEST(NoAllocationTest, FtrPushAndFlushAllocateNothingAfterTheFirstSamples) {
  for (const Config& config : kConfigs) {
    Survey survey(config.aux);
    runtime::Engine engine = runtime::Engine::FromText(io::FormatModelText(
        perf::SurveyModel(config.aux, config.lag_s, config.sensor)));
    std::vector<ftr_output> out(static_cast<std::size_t>(engine.max_outputs()));
    const int size = static_cast<int>(out.size());
    std::size_t outputs = 0;
    bool refused = false;
    auto push = [&](std::size_t r) {
      ftr_sample s;
      s.time = survey.time[r];
      s.bx = survey.B(0, r);
      s.by = survey.B(1, r);
      s.bz = survey.B(2, r);
      s.f = survey.table.channel(4).values[r];
      s.aux = survey.Aux(r);
      s.roll_deg = survey.table.channel(5).values[r];
      s.pitch_deg = survey.table.channel(6).values[r];
      s.temp_c = kNaN;
      const int n = engine.Push(s, out.data(), size);
      if (n < 0) refused = true;
      outputs += static_cast<std::size_t>(std::max(n, 0));
    };
    for (std::size_t r = 0; r < kWarmup; ++r) push(r);
    Counting counting;
    for (std::size_t r = kWarmup; r < kWarmup + kSamples; ++r) push(r);
    const int flushed = engine.Flush(out.data(), size);
    const long calls = counting.Stop();
    EXPECT_EQ(calls, 0) << "aux " << config.aux << " lag " << config.lag_s
                        << " sensor " << config.sensor;
    EXPECT_FALSE(refused);
    EXPECT_EQ(outputs + static_cast<std::size_t>(flushed), kWarmup + kSamples);
  }
}

}  // namespace
}  // namespace fluxtrim
