#include "src/core/apply.h"

#include <cmath>
#include <cstring>
#include <random>

#include <gtest/gtest.h>

#include "io/error.h"
#include "io/memory_recording.h"
#include "io/model_file.h"
#include "models/tolles_lawson.h"

namespace fluxtrim::core {
namespace {

constexpr double kPi = 3.14159265358979323846;

proto::CompensationModel TestModel(double lag_s) {
  proto::CompensationModel m;
  m.set_schema_version(io::kModelSchemaVersion);
  m.mutable_terms()->set_set("default");
  const models::TermOptions terms;
  int i = 0;
  for (const std::string& name : models::TermNames(terms)) {
    m.mutable_terms()->add_names(name);
    proto::Coefficient* c = m.add_coefficients();
    c->set_name(name);
    // Arbitrary but plausible sizes per group: nT, dimensionless, s.
    c->set_value(name.rfind("perm", 0) == 0   ? 2.0 + i
                 : name.rfind("ind", 0) == 0  ? 1e-4 * (i - 6)
                                              : 3e-5 * (i - 12));
    ++i;
  }
  m.mutable_filter()->set_order(4);
  m.mutable_filter()->set_low_hz(0.1);
  m.mutable_filter()->set_high_hz(0.9);
  m.set_derivative_half_width(2);
  m.set_sample_rate_hz(10.0);
  m.set_gap_factor(1.5);
  m.set_lag_s(lag_s);
  m.set_interference_mean_nt(4.0);
  m.mutable_inputs()->set_field_source("f");
  m.mutable_attitude()->set_present(true);
  m.mutable_attitude()->set_roll_min_deg(-10);
  m.mutable_attitude()->set_roll_max_deg(10);
  m.mutable_attitude()->set_pitch_min_deg(-5);
  m.mutable_attitude()->set_pitch_max_deg(5);
  return m;
}

// A recording with rotations, noise, a time gap and a dropout.
io::Table TestRecording(std::size_t n, double rate_hz) {
  io::Table t({{"time", "s", ""}, {"bx", "nT", ""}, {"by", "nT", ""},
               {"bz", "nT", ""}, {"f", "nT", ""}, {"roll", "deg", ""},
               {"pitch", "deg", ""}, {"extra", "", ""}});
  std::mt19937_64 rng(7);
  std::uniform_real_distribution<double> u(-1, 1);
  for (std::size_t i = 0; i < n; ++i) {
    double time = 100.0 + static_cast<double>(i) / rate_hz;
    if (i >= n / 2) time += 3.0;  // a gap
    const double a = 0.4 * std::sin(2 * kPi * 0.15 * time);
    const double b[3] = {20000 * std::cos(a), 20000 * std::sin(a),
                         45000 + 50 * std::sin(2 * kPi * 0.3 * time)};
    const double values[8] = {time, b[0], b[1], b[2],
                              std::sqrt(b[0] * b[0] + b[1] * b[1] + b[2] * b[2]) + u(rng),
                              8 * std::sin(time), 3 * std::cos(time), u(rng)};
    for (std::size_t c = 0; c < 8; ++c) t.channel(c).values.push_back(values[c]);
  }
  t.Column("bx")[n / 3] = std::nan("");  // dropout
  return t;
}

bool BitEqual(double a, double b) { return std::memcmp(&a, &b, sizeof a) == 0; }

TEST(ApplyTest, ChunkedOutputEqualsInMemoryOutputBitForBit) {
  for (double lag : {0.0, 0.07, -0.15}) {
    const proto::CompensationModel model = TestModel(lag);
    const io::Table rec = TestRecording(2000, 10.0);
    const io::Table whole = ApplyInMemory(model, rec);
    for (std::size_t chunk : {1u, 7u, 100u, 1999u}) {
      io::TableReader reader(rec, "rec");
      io::TableWriter writer(OutputSchema(rec.Schema()));
      ApplyOptions options;
      options.chunk_rows = chunk;
      ApplyChunked(model, reader, writer, options);
      const io::Table& part = writer.table();
      ASSERT_EQ(part.rows(), whole.rows());
      ASSERT_EQ(part.cols(), whole.cols());
      for (std::size_t c = 0; c < whole.cols(); ++c) {
        for (std::size_t r = 0; r < whole.rows(); ++r) {
          ASSERT_TRUE(BitEqual(part.channel(c).values[r],
                               whole.channel(c).values[r]))
              << "lag " << lag << " chunk " << chunk << " channel "
              << whole.channel(c).info.name << " row " << r;
        }
      }
    }
  }
}

TEST(ApplyTest, OutputKeepsEveryInputChannelAndAddsTheThreeNew) {
  const io::Table rec = TestRecording(300, 10.0);
  const io::Table out = ApplyInMemory(TestModel(0.0), rec);
  for (const io::ChannelInfo& c : rec.Schema()) {
    for (std::size_t i = 0; i < rec.rows(); ++i) {
      ASSERT_TRUE(BitEqual(out.Column(c.name)[i], rec.Column(c.name)[i]))
          << c.name << " row " << i;
    }
  }
  for (const char* name : {"f_comp", "f_interference", "flags"}) {
    EXPECT_TRUE(out.Has(name)) << name;
  }
  // f_comp = f - f_interference wherever nothing is flagged.
  const auto& f = rec.Column("f");
  for (std::size_t i = 0; i < out.rows(); ++i) {
    if (out.Column("flags")[i] != 0) continue;
    EXPECT_DOUBLE_EQ(out.Column("f_comp")[i], f[i] - out.Column("f_interference")[i]);
  }
  // The bad fluxgate sample is flagged and has no output value.
  const std::size_t bad = 100;
  EXPECT_TRUE(static_cast<unsigned>(out.Column("flags")[bad]) & models::kFlagBadSample);
  EXPECT_TRUE(std::isnan(out.Column("f_comp")[bad]));
}

TEST(ApplyTest, FlagsAttitudeOutsideTheFittedRange) {
  io::Table rec = TestRecording(300, 10.0);
  rec.Column("roll")[200] = 25.0;  // beyond the model's +-10 deg
  const io::Table out = ApplyInMemory(TestModel(0.0), rec);
  EXPECT_TRUE(static_cast<unsigned>(out.Column("flags")[200]) &
              models::kFlagAttitudeOutside);
  EXPECT_FALSE(static_cast<unsigned>(out.Column("flags")[150]) &
               models::kFlagAttitudeOutside);
}

TEST(ApplyTest, RefusesARecordingWithoutTheScalarChannelTheModelNeeds) {
  io::Table rec = TestRecording(300, 10.0);
  io::Table no_f({{"time", "s", ""}, {"bx", "nT", ""}, {"by", "nT", ""},
                  {"bz", "nT", ""}});
  for (const char* name : {"time", "bx", "by", "bz"}) {
    no_f.Column(name) = rec.Column(name);
  }
  try {
    ApplyInMemory(TestModel(0.0), no_f, "line7.csv");
    FAIL() << "expected a refusal";
  } catch (const io::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("line7.csv"), std::string::npos);
    EXPECT_NE(std::string(e.what()).find("f"), std::string::npos);
  }
}

TEST(ApplyTest, RefusesASampleRateOffByMoreThanOnePercent) {
  const io::Table ok = TestRecording(300, 10.09);   // 0.9 %: accepted
  EXPECT_NO_THROW(ApplyInMemory(TestModel(0.0), ok));
  const io::Table off = TestRecording(300, 10.2);   // 2 %: refused
  try {
    ApplyInMemory(TestModel(0.0), off, "line8.csv");
    FAIL() << "expected a refusal";
  } catch (const io::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("sample rate"), std::string::npos);
  }
}

TEST(ApplyTest, RefusesAModelFileFromAnUnknownSchemaVersion) {
  proto::CompensationModel m = TestModel(0.0);
  m.set_schema_version(io::kModelSchemaVersion + 1);
  EXPECT_THROW(io::ParseModelText(io::FormatModelText(m), "future.model"),
               io::InputError);
}

// Gives two chunks, then fails as a reader does on a bad line.
class FailingReader : public io::RecordingReader {
 public:
  explicit FailingReader(const io::Table& t) : inner_(t, "bad.csv") {}
  const std::vector<io::ChannelInfo>& channels() const override {
    return inner_.channels();
  }
  std::size_t ReadChunk(io::Table* chunk, std::size_t max_rows) override {
    if (++calls_ > 2) throw io::InputError("bad.csv", 42, 3, "expected a number");
    return inner_.ReadChunk(chunk, max_rows);
  }
  const std::string& path() const override { return inner_.path(); }

 private:
  io::TableReader inner_;
  int calls_ = 0;
};

TEST(ApplyTest, BadInputStillDeliversEverySampleAcceptedBeforeIt) {
  const io::Table rec = TestRecording(1000, 10.0);
  FailingReader reader(rec);
  io::TableWriter writer(OutputSchema(rec.Schema()));
  ApplyOptions options;
  options.chunk_rows = 300;
  EXPECT_THROW(ApplyChunked(TestModel(0.0), reader, writer, options),
               io::InputError);
  ASSERT_EQ(writer.table().rows(), 600u);
  EXPECT_EQ(writer.table().Column("time")[599], rec.Column("time")[599]);
}

}  // namespace
}  // namespace fluxtrim::core
