#include "src/runtime/fluxtrim_runtime.h"

#include <chrono>
#include <cmath>
#include <cstring>
#include <exception>
#include <fstream>
#include <sstream>
#include <vector>

#include "models/compensator.h"
#include "src/runtime/text_model.h"

struct ftr_engine {
  explicit ftr_engine(const fluxtrim::models::CompensatorModel& model,
                      std::vector<std::string> aux)
      : compensator(model),
        aux_names(std::move(aux)),
        buffer(static_cast<std::size_t>(compensator.max_outputs())) {}
  fluxtrim::models::Compensator compensator;
  std::vector<std::string> aux_names;
  std::vector<fluxtrim::models::CompensatedSample> buffer;
  int64_t last_push_ns = 0;
};

namespace {

void SetError(char* error, size_t size, const std::string& message) {
  if (!error || size == 0) return;
  std::strncpy(error, message.c_str(), size - 1);
  error[size - 1] = '\0';
}

int Copy(const fluxtrim::models::CompensatedSample* in, int n, ftr_output* out) {
  for (int i = 0; i < n; ++i) {
    out[i].index = in[i].index;
    out[i].time = in[i].time;
    out[i].f_comp = in[i].f_comp;
    out[i].f_interference = in[i].f_interference;
    out[i].flags = in[i].flags;
  }
  return n;
}

}  // namespace

extern "C" {

ftr_engine* ftr_open_text(const char* model_text, char* error,
                          size_t error_size) {
  try {
    std::vector<std::string> aux;
    const auto model = fluxtrim::runtime::CompensatorModelFromText(
        model_text ? model_text : "", "<model text>", &aux);
    return new ftr_engine(model, std::move(aux));
  } catch (const std::exception& e) {
    SetError(error, error_size, e.what());
    return nullptr;
  }
}

ftr_engine* ftr_open_file(const char* model_path, char* error,
                          size_t error_size) {
  try {
    std::ifstream in(model_path ? model_path : "", std::ios::binary);
    if (!in) {
      SetError(error, error_size,
               std::string(model_path ? model_path : "(null)") +
                   ": cannot open the model file");
      return nullptr;
    }
    std::ostringstream text;
    text << in.rdbuf();
    std::vector<std::string> aux;
    const auto model = fluxtrim::runtime::CompensatorModelFromText(
        text.str(), model_path, &aux);
    return new ftr_engine(model, std::move(aux));
  } catch (const std::exception& e) {
    SetError(error, error_size, e.what());
    return nullptr;
  }
}

void ftr_close(ftr_engine* engine) { delete engine; }

int ftr_max_outputs(const ftr_engine* e) { return e->compensator.max_outputs(); }
int ftr_latency_samples(const ftr_engine* e) {
  return e->compensator.latency_samples();
}
int ftr_half_width(const ftr_engine* e) {
  return e->compensator.model().engine.half_width;
}
double ftr_sample_rate_hz(const ftr_engine* e) {
  return e->compensator.model().engine.sample_rate_hz;
}
size_t ftr_aux_count(const ftr_engine* e) { return e->aux_names.size(); }
const char* ftr_aux_name(const ftr_engine* e, size_t i) {
  return i < e->aux_names.size() ? e->aux_names[i].c_str() : nullptr;
}
int ftr_needs_scalar(const ftr_engine* e) {
  return e->compensator.model().scalar_sensor ? 1 : 0;
}

int ftr_push(ftr_engine* e, const ftr_sample* s, ftr_output* out,
             int out_size) {
  if (out_size < e->compensator.max_outputs()) return -1;
  const auto start = std::chrono::steady_clock::now();
  const double b[3] = {s->bx, s->by, s->bz};
  const double temp = std::isnan(s->temp_c)
                          ? e->compensator.model().sensor.reference_temp_c
                          : s->temp_c;
  const int n = e->compensator.Push(s->time, b, s->f, s->aux, s->roll_deg,
                                    s->pitch_deg, temp, e->buffer.data());
  Copy(e->buffer.data(), n, out);
  e->last_push_ns = std::chrono::duration_cast<std::chrono::nanoseconds>(
                        std::chrono::steady_clock::now() - start)
                        .count();
  return n;
}

int ftr_flush(ftr_engine* e, ftr_output* out, int out_size) {
  if (out_size < e->compensator.max_outputs()) return -1;
  const int n = e->compensator.Flush(e->buffer.data());
  return Copy(e->buffer.data(), n, out);
}

int64_t ftr_last_push_ns(const ftr_engine* e) { return e->last_push_ns; }

}  // extern "C"
