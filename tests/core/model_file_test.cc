// The model file (io/model_file.h) and its conversion from and to fits
// (src/core/fit_model.h).
#include "io/model_file.h"

#include <cmath>
#include <cstdio>
#include <cstring>
#include <string>

#include <google/protobuf/util/message_differencer.h>
#include <gtest/gtest.h>
#include <unistd.h>

#include "io/error.h"
#include "src/core/fit_model.h"

namespace fluxtrim {
namespace {

// A fit result as FitModel would leave it, with awkward doubles.
core::FitResult SampleFit() {
  core::FitResult fit;
  fit.usable = true;
  fit.engine.terms = models::ParseTermSet("default");
  fit.engine.terms.aux = {"i_motor"};
  fit.engine.half_width = 2;
  fit.engine.sample_rate_hz = 10.0;
  fit.engine.gap_factor = 1.5;
  fit.band.order = 4;
  fit.band.low_hz = 0.1;
  fit.band.high_hz = 0.9;
  fit.term_names = models::TermNames(fit.engine.terms);
  for (std::size_t j = 0; j < fit.term_names.size(); ++j) {
    core::FitCoefficient c;
    c.name = fit.term_names[j];
    c.unit = core::TermUnit(c.name);
    c.value = (0.1 + 0.2) * std::pow(10.0, -static_cast<double>(j)) / 3.0;
    c.std_error = 1e-300 * static_cast<double>(j + 1);
    c.held = j == 5;
    c.note = c.held ? "held for the test" : "";
    fit.coefficients.push_back(c);
    fit.values.push_back(c.value);
  }
  fit.lag_s = 0.123456789012345678;
  fit.lag_estimated = true;
  fit.interference_mean_nT = -12.5;
  fit.fom_before_nT = 37.8;
  fit.fom_after_nT = 0.117;
  fit.improvement_ratio = 253.6;
  fit.band_rms_before_nT = 0.657;
  fit.band_rms_after_nT = 0.0026;
  fit.condition_number = 102.0;
  fit.attitude_present = true;
  fit.roll_min_deg = -11.2;
  fit.roll_max_deg = 10.9;
  fit.pitch_min_deg = -5.5;
  fit.pitch_max_deg = 6.25;
  fit.warnings = {"a warning"};
  fit.field_source = "f";
  fit.samples = 5961;
  return fit;
}

std::string TempPath(const char* suffix) {
  char path[] = "/tmp/fluxtrim_model_XXXXXX";
  const int fd = mkstemp(path);
  EXPECT_GE(fd, 0);
  close(fd);
  std::remove(path);
  return std::string(path) + suffix;
}

TEST(ModelFile, RoundTripsEveryFieldAndEveryDoubleExactly) {
  core::FitProvenance prov;
  prov.file = "box.csv";
  prov.channel_map = {{"f", "MAG_RAW"}};
  prov.tool_version = "0.1.0";
  const proto::CompensationModel model = core::ModelFromFit(SampleFit(), prov);
  const std::string text = io::FormatModelText(model);
  const proto::CompensationModel back = io::ParseModelText(text, "mem");
  EXPECT_TRUE(google::protobuf::util::MessageDifferencer::Equals(model, back));
  for (int i = 0; i < model.coefficients_size(); ++i) {
    const double a = model.coefficients(i).value(), b = back.coefficients(i).value();
    EXPECT_EQ(std::memcmp(&a, &b, sizeof a), 0) << i;
  }
  EXPECT_EQ(back.schema_version(), io::kModelSchemaVersion);
  EXPECT_EQ(back.inputs().channel_map().at("f"), "MAG_RAW");
  EXPECT_FALSE(back.has_sensor());  // left for `calibrate`
}

TEST(ModelFile, TextStartsWithAnExplanatoryComment) {
  const std::string text =
      io::FormatModelText(core::ModelFromFit(SampleFit(), {}));
  EXPECT_EQ(text.rfind("# fluxtrim compensation model", 0), 0u);
  EXPECT_NE(text.find("multiplied by Bt"), std::string::npos);
  EXPECT_NE(text.find("lag_s > 0"), std::string::npos);
}

TEST(ModelFile, WriteThenReadGivesTheSameModel) {
  const proto::CompensationModel model = core::ModelFromFit(SampleFit(), {});
  const std::string path = TempPath(".ftmodel");
  io::WriteModelFile(path, model);
  const proto::CompensationModel back = io::ReadModelFile(path);
  EXPECT_TRUE(google::protobuf::util::MessageDifferencer::Equals(model, back));
  std::remove(path.c_str());
}

std::string ErrorOf(const std::string& text) {
  try {
    io::ParseModelText(text, "model.txt");
  } catch (const io::InputError& e) {
    return e.what();
  }
  return "";
}

TEST(ModelFile, UnknownVersionIsRefusedNamingFileAndVersion) {
  std::string text = io::FormatModelText(core::ModelFromFit(SampleFit(), {}));
  const auto at = text.find("schema_version: 1");
  ASSERT_NE(at, std::string::npos);
  text.replace(at, 17, "schema_version: 7\nfuture_field: 3");
  const std::string error = ErrorOf(text);
  EXPECT_NE(error.find("model.txt"), std::string::npos) << error;
  EXPECT_NE(error.find("version 7"), std::string::npos) << error;
}

TEST(ModelFile, MissingVersionIsRefused) {
  const std::string error = ErrorOf("sample_rate_hz: 10\n");
  EXPECT_NE(error.find("schema_version"), std::string::npos) << error;
}

TEST(ModelFile, SyntaxErrorNamesLineAndColumn) {
  const std::string error = ErrorOf("schema_version: 1\nsample_rate_hz: ten\n");
  EXPECT_NE(error.find("model.txt"), std::string::npos) << error;
  EXPECT_NE(error.find(":2:"), std::string::npos) << error;
}

TEST(ModelFile, InconsistentContentIsRefused) {
  proto::CompensationModel model = core::ModelFromFit(SampleFit(), {});
  model.mutable_coefficients()->RemoveLast();
  EXPECT_NE(ErrorOf(io::FormatModelText(model)).find("one coefficient per term"),
            std::string::npos);
  model = core::ModelFromFit(SampleFit(), {});
  model.set_sample_rate_hz(0);
  EXPECT_NE(ErrorOf(io::FormatModelText(model)).find("sample_rate_hz"),
            std::string::npos);
  model = core::ModelFromFit(SampleFit(), {});
  model.mutable_coefficients(3)->set_value(NAN);
  EXPECT_NE(ErrorOf(io::FormatModelText(model)).find("finite"), std::string::npos);
}

TEST(ModelFile, MissingFileIsAnInputError) {
  EXPECT_THROW(io::ReadModelFile("/nonexistent/model.ftmodel"), io::InputError);
}

TEST(ModelFile, EngineOptionsAndCoefficientsComeBackForApply) {
  const core::FitResult fit = SampleFit();
  const proto::CompensationModel model = core::ModelFromFit(fit, {});
  const models::TermEngine::Options o = core::EngineOptionsFromModel(model);
  EXPECT_EQ(models::TermNames(o.terms), fit.term_names);
  EXPECT_EQ(o.half_width, 2);
  EXPECT_EQ(o.sample_rate_hz, 10.0);
  EXPECT_EQ(core::CoefficientsFromModel(model), fit.values);
  const core::BandPassOptions band = core::BandFromModel(model);
  EXPECT_EQ(band.order, 4);
  EXPECT_EQ(band.high_hz, 0.9);
  proto::CompensationModel bad = model;
  bad.mutable_terms()->set_names(0, "perm_q");
  EXPECT_THROW(core::EngineOptionsFromModel(bad), std::invalid_argument);
}

}  // namespace
}  // namespace fluxtrim
