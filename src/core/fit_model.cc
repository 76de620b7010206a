#include "src/core/fit_model.h"

#include <stdexcept>

#include "io/model_file.h"

namespace fluxtrim::core {

proto::CompensationModel ModelFromFit(const FitResult& fit,
                                      const FitProvenance& provenance) {
  proto::CompensationModel m;
  m.set_schema_version(io::kModelSchemaVersion);
  m.set_tool_version(provenance.tool_version);
  auto* terms = m.mutable_terms();
  terms->set_set(models::TermSetName(fit.engine.terms));
  for (const auto& a : fit.engine.terms.aux) terms->add_aux(a);
  for (const auto& n : fit.term_names) terms->add_names(n);
  auto* filter = m.mutable_filter();
  filter->set_order(fit.band.order);
  filter->set_low_hz(fit.band.low_hz);
  filter->set_high_hz(fit.band.high_hz);
  filter->set_kind("butterworth band-pass, zero-phase (forward-backward)");
  m.set_derivative_half_width(fit.engine.half_width);
  m.set_sample_rate_hz(fit.engine.sample_rate_hz);
  m.set_gap_factor(fit.engine.gap_factor);
  m.set_lag_s(fit.lag_s);
  m.set_lag_std_error_s(fit.lag_std_error_s);
  m.set_lag_estimated(fit.lag_estimated);
  for (const FitCoefficient& c : fit.coefficients) {
    auto* out = m.add_coefficients();
    out->set_name(c.name);
    out->set_value(c.value);
    out->set_std_error(c.std_error);
    out->set_unit(c.unit);
    out->set_held(c.held);
    out->set_note(c.note);
  }
  m.set_interference_mean_nt(fit.interference_mean_nT);
  auto* att = m.mutable_attitude();
  att->set_present(fit.attitude_present);
  if (fit.attitude_present) {
    att->set_roll_min_deg(fit.roll_min_deg);
    att->set_roll_max_deg(fit.roll_max_deg);
    att->set_pitch_min_deg(fit.pitch_min_deg);
    att->set_pitch_max_deg(fit.pitch_max_deg);
  }
  auto* q = m.mutable_quality();
  q->set_fom_before_nt(fit.fom_before_nT);
  q->set_fom_after_nt(fit.fom_after_nT);
  q->set_improvement_ratio(fit.improvement_ratio);
  q->set_band_rms_before_nt(fit.band_rms_before_nT);
  q->set_band_rms_after_nt(fit.band_rms_after_nT);
  q->set_condition_number(fit.condition_number);
  q->set_ridge_lambda(fit.ridge_lambda);
  q->set_ridge_method(fit.ridge_method);
  q->set_residual_sigma_nt(fit.residual_sigma_nT);
  q->set_samples_used(static_cast<unsigned>(fit.samples_used));
  q->set_loss(fit.loss);
  q->set_loss_scale_nt(fit.loss_scale_nT);
  for (const auto& warning : fit.warnings) q->add_warnings(warning);
  auto* in = m.mutable_inputs();
  in->set_file(provenance.file);
  for (const auto& [name, column] : provenance.channel_map) {
    (*in->mutable_channel_map())[name] = column;
  }
  in->set_field_source(fit.field_source);
  in->set_samples(static_cast<unsigned>(fit.samples));
  in->set_start_s(fit.start_s);
  in->set_end_s(fit.end_s);
  in->set_maneuver_source(fit.maneuver_source);
  return m;
}

models::TermEngine::Options EngineOptionsFromModel(
    const proto::CompensationModel& model) {
  models::TermEngine::Options options;
  options.terms = models::ParseTermSet(model.terms().set());
  for (const auto& a : model.terms().aux()) options.terms.aux.push_back(a);
  const std::vector<std::string> names = models::TermNames(options.terms);
  bool same = static_cast<int>(names.size()) == model.terms().names_size();
  for (std::size_t i = 0; same && i < names.size(); ++i) {
    same = names[i] == model.terms().names(static_cast<int>(i));
  }
  if (!same) {
    throw std::invalid_argument(
        "the model's term names do not match its term set '" +
        model.terms().set() + "'");
  }
  options.half_width = model.derivative_half_width();
  options.sample_rate_hz = model.sample_rate_hz();
  options.gap_factor = model.gap_factor() >= 1.0 ? model.gap_factor() : 1.5;
  return options;
}

std::vector<double> CoefficientsFromModel(
    const proto::CompensationModel& model) {
  std::vector<double> values;
  for (const auto& c : model.coefficients()) values.push_back(c.value());
  return values;
}

BandPassOptions BandFromModel(const proto::CompensationModel& model) {
  BandPassOptions band;
  band.order = model.filter().order();
  band.low_hz = model.filter().low_hz();
  band.high_hz = model.filter().high_hz();
  return band;
}

}  // namespace fluxtrim::core
