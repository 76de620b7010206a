#include "src/runtime/fluxtrim_runtime.h"

#include <cmath>
#include <random>

#include <gtest/gtest.h>

#include "io/model_file.h"
#include "models/tolles_lawson.h"
#include "src/core/apply.h"

namespace fluxtrim::runtime {
namespace {

constexpr double kPi = 3.14159265358979323846;

proto::CompensationModel TestModel(double lag_s, const std::string& aux) {
  proto::CompensationModel m;
  m.set_schema_version(io::kModelSchemaVersion);
  m.mutable_terms()->set_set("default");
  models::TermOptions terms;
  if (!aux.empty()) {
    terms.aux = {aux};
    m.mutable_terms()->add_aux(aux);
  }
  int i = 0;
  for (const std::string& name : models::TermNames(terms)) {
    proto::Coefficient* c = m.add_coefficients();
    c->set_name(name);
    c->set_value(name.rfind("perm", 0) == 0  ? 1.5 * i - 2
                 : name.rfind("ind", 0) == 0 ? 2e-4 * (i - 5)
                 : name.rfind("eddy", 0) == 0 ? 4e-5 * (i - 11)
                                              : 0.4 * (i - 17));
    m.mutable_terms()->add_names(name);
    ++i;
  }
  m.set_derivative_half_width(3);
  m.set_sample_rate_hz(20.0);
  m.set_gap_factor(1.5);
  m.set_lag_s(lag_s);
  m.set_interference_mean_nt(-2.5);
  m.mutable_filter()->set_order(4);
  m.mutable_filter()->set_low_hz(0.1);
  m.mutable_filter()->set_high_hz(0.9);
  m.mutable_inputs()->set_field_source("f");
  m.mutable_sensor()->mutable_gains()->set_x(1.01);
  m.mutable_sensor()->mutable_gains()->set_y(0.99);
  m.mutable_sensor()->mutable_gains()->set_z(1.002);
  m.mutable_sensor()->mutable_offsets_nt()->set_x(12.0);
  m.mutable_sensor()->mutable_nonorthogonality_deg()->set_y(0.3);
  m.mutable_sensor()->set_reference_temp_c(20.0);
  return m;
}

io::Table TestRecording(std::size_t n, const std::string& aux) {
  std::vector<io::ChannelInfo> schema = {{"time", "s", ""}, {"bx", "nT", ""},
                                         {"by", "nT", ""},  {"bz", "nT", ""},
                                         {"f", "nT", ""}};
  if (!aux.empty()) schema.push_back({aux, "A", ""});
  io::Table t(schema);
  std::mt19937_64 rng(11);
  std::uniform_real_distribution<double> u(-1, 1);
  for (std::size_t i = 0; i < n; ++i) {
    double time = 5.0 + static_cast<double>(i) / 20.0;
    if (i >= 2 * n / 3) time += 1.0;  // a gap
    const double a = 0.5 * std::sin(2 * kPi * 0.1 * time);
    const double b[3] = {21000 * std::cos(a), 21000 * std::sin(a),
                         43000 + 40 * std::sin(2 * kPi * 0.4 * time)};
    t.Column("time").push_back(time);
    t.Column("bx").push_back(b[0]);
    t.Column("by").push_back(b[1]);
    t.Column("bz").push_back(b[2]);
    t.Column("f").push_back(std::sqrt(b[0] * b[0] + b[1] * b[1] + b[2] * b[2]) +
                            0.1 * u(rng));
    if (!aux.empty()) t.Column(aux).push_back(10 + 5 * u(rng));
  }
  t.Column("by")[n / 4] = std::nan("");
  return t;
}

// The runtime must reproduce apply to 1e-9 nT on every sample, edges,
// gaps and bad samples included (issue acceptance).
TEST(RuntimeTest, OutputEqualsApplyOnEverySample) {
  constexpr double kTolerance_nT = 1e-9;
  for (double lag : {0.0, 0.031, -0.12}) {
    for (const std::string aux : {"", "i_motor"}) {
      const proto::CompensationModel model = TestModel(lag, aux);
      const io::Table rec = TestRecording(900, aux);
      const io::Table applied = core::ApplyInMemory(model, rec);

      Engine engine = Engine::FromText(io::FormatModelText(model));
      std::vector<ftr_output> out(static_cast<std::size_t>(engine.max_outputs()));
      std::vector<ftr_output> all;
      for (std::size_t i = 0; i < rec.rows(); ++i) {
        ftr_sample s;
        s.time = rec.Column("time")[i];
        s.bx = rec.Column("bx")[i];
        s.by = rec.Column("by")[i];
        s.bz = rec.Column("bz")[i];
        s.f = rec.Column("f")[i];
        double a = aux.empty() ? 0.0 : rec.Column(aux)[i];
        s.aux = aux.empty() ? nullptr : &a;
        s.roll_deg = s.pitch_deg = s.temp_c = NAN;
        const int n = engine.Push(s, out.data(), static_cast<int>(out.size()));
        ASSERT_GE(n, 0);
        all.insert(all.end(), out.begin(), out.begin() + n);
      }
      const int n = engine.Flush(out.data(), static_cast<int>(out.size()));
      all.insert(all.end(), out.begin(), out.begin() + n);
      ASSERT_EQ(all.size(), rec.rows());
      for (std::size_t i = 0; i < all.size(); ++i) {
        ASSERT_EQ(all[i].index, i);
        const double a = applied.Column("f_comp")[i];
        ASSERT_EQ(std::isnan(all[i].f_comp), std::isnan(a)) << i;
        if (!std::isnan(a)) {
          ASSERT_NEAR(all[i].f_comp, a, kTolerance_nT) << "lag " << lag << " row " << i;
          ASSERT_NEAR(all[i].f_interference, applied.Column("f_interference")[i],
                      kTolerance_nT);
        }
        ASSERT_EQ(static_cast<double>(all[i].flags), applied.Column("flags")[i]) << i;
      }
    }
  }
}

TEST(RuntimeTest, StatesItsLatencyFromTheDerivativeHalfWidth) {
  Engine engine = Engine::FromText(io::FormatModelText(TestModel(0.0, "")));
  EXPECT_EQ(ftr_half_width(engine.get()), 3);
  EXPECT_EQ(engine.latency_samples(), 3);
  // Exactly k pushes produce nothing; the next produces the first sample.
  std::vector<ftr_output> out(static_cast<std::size_t>(engine.max_outputs()));
  for (int i = 0; i <= 3; ++i) {
    ftr_sample s{0.05 * i, 20000, 1000.0 * i, 44000, 48000, nullptr, NAN, NAN, NAN};
    const int n = engine.Push(s, out.data(), static_cast<int>(out.size()));
    EXPECT_EQ(n, i < 3 ? 0 : 1);
  }
  EXPECT_GE(ftr_last_push_ns(engine.get()), 0);
}

TEST(RuntimeTest, RefusesABadModelWithAMessage) {
  char error[256] = {0};
  EXPECT_EQ(ftr_open_text("schema_version: 7\n", error, sizeof error), nullptr);
  EXPECT_NE(std::string(error).find("schema_version"), std::string::npos);
  EXPECT_EQ(ftr_open_text("terms { set: \"default\" \n", error, sizeof error),
            nullptr);
  EXPECT_NE(std::string(error).find(":2:"), std::string::npos) << error;
  EXPECT_EQ(ftr_open_file("/nonexistent/model.txt", error, sizeof error), nullptr);
  EXPECT_NE(std::string(error).find("/nonexistent/model.txt"), std::string::npos);
}

TEST(RuntimeTest, RefusesAnOutputBufferSmallerThanItsMaximum) {
  Engine engine = Engine::FromText(io::FormatModelText(TestModel(0.0, "")));
  ftr_output out[1];
  ftr_sample s{0, 20000, 0, 44000, 48000, nullptr, NAN, NAN, NAN};
  EXPECT_EQ(engine.Push(s, out, 1), -1);
}

}  // namespace
}  // namespace fluxtrim::runtime
