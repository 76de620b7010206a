/* fluxtrim runtime: embeddable real-time compensation with a C API.
 *
 * Open an engine with a model file written by `fluxtrim fit`, push one
 * sample at a time, and receive compensated samples as they become ready.
 * Each sample leaves ftr_latency_samples() samples after it enters: the
 * centred derivative of half-width k needs k samples after it (plus what a
 * positive scalar-sensor lag needs). The numbers equal `fluxtrim apply` on
 * the same recording, edges included. No allocation after ftr_open_*; no
 * Ceres, no protobuf. Not thread-safe per engine; one engine per stream.
 *
 * Units: time s; fluxgate bx, by, bz nT in body axes (x forward,
 * y starboard, z down); f nT (NaN when the platform has no scalar sensor);
 * roll and pitch degrees (NaN when not logged); temperature deg C.
 */
#ifndef FLUXTRIM_RUNTIME_H_
#define FLUXTRIM_RUNTIME_H_

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct ftr_engine ftr_engine;

typedef struct ftr_sample {
  double time;
  double bx, by, bz;
  double f;           /* NaN: none */
  const double* aux;  /* ftr_aux_count() values, in ftr_aux_name() order */
  double roll_deg;    /* NaN: none */
  double pitch_deg;   /* NaN: none */
  double temp_c;      /* NaN: reference temperature of the calibration */
} ftr_sample;

/* Flags, as in the `flags` channel of fluxtrim apply. */
enum {
  FTR_FLAG_GAP_EDGE = 1,
  FTR_FLAG_DERIVATIVE_INVALID = 2,
  FTR_FLAG_ATTITUDE_OUTSIDE = 4,
  FTR_FLAG_BAD_SAMPLE = 8,
  FTR_FLAG_LAG_EDGE = 16
};

typedef struct ftr_output {
  uint64_t index;        /* 0-based number of the input sample */
  double time;           /* s */
  double f_comp;         /* nT; NaN for a bad sample */
  double f_interference; /* nT, model mean level removed */
  uint32_t flags;
} ftr_output;

/* Opens an engine from a model file / model text. Returns NULL on failure
 * and writes a message (file, line, what was expected) to error. */
ftr_engine* ftr_open_file(const char* model_path, char* error, size_t error_size);
ftr_engine* ftr_open_text(const char* model_text, char* error, size_t error_size);
void ftr_close(ftr_engine* engine);

/* Largest number of outputs one push or flush returns: size `out` so. */
int ftr_max_outputs(const ftr_engine* engine);
/* Fixed delay between input and output, samples. */
int ftr_latency_samples(const ftr_engine* engine);
/* Half-width k of the centred derivative, samples. */
int ftr_half_width(const ftr_engine* engine);
double ftr_sample_rate_hz(const ftr_engine* engine);
/* Extra channels the model expects (e.g. motor currents). */
size_t ftr_aux_count(const ftr_engine* engine);
const char* ftr_aux_name(const ftr_engine* engine, size_t i);
/* 1 when the model was fitted on a scalar sensor (f must be pushed). */
int ftr_needs_scalar(const ftr_engine* engine);

/* Pushes one sample; writes the ready outputs to out (capacity out_size,
 * at least ftr_max_outputs) in input order; returns their count, or -1 when
 * out_size is too small. */
int ftr_push(ftr_engine* engine, const ftr_sample* sample, ftr_output* out,
             int out_size);
/* End of input: emits the samples still pending. */
int ftr_flush(ftr_engine* engine, ftr_output* out, int out_size);

/* Wall time of the last ftr_push, nanoseconds (its own compute time). */
int64_t ftr_last_push_ns(const ftr_engine* engine);

#ifdef __cplusplus
}  /* extern "C" */

#include <memory>
#include <stdexcept>
#include <string>

namespace fluxtrim::runtime {

// Thin C++ wrapper: owns the engine, throws std::runtime_error on open.
class Engine {
 public:
  static Engine FromFile(const std::string& path) {
    char error[512] = {0};
    ftr_engine* e = ftr_open_file(path.c_str(), error, sizeof error);
    if (!e) throw std::runtime_error(error);
    return Engine(e);
  }
  static Engine FromText(const std::string& text) {
    char error[512] = {0};
    ftr_engine* e = ftr_open_text(text.c_str(), error, sizeof error);
    if (!e) throw std::runtime_error(error);
    return Engine(e);
  }
  int Push(const ftr_sample& s, ftr_output* out, int n) {
    return ftr_push(engine_.get(), &s, out, n);
  }
  int Flush(ftr_output* out, int n) { return ftr_flush(engine_.get(), out, n); }
  int max_outputs() const { return ftr_max_outputs(engine_.get()); }
  int latency_samples() const { return ftr_latency_samples(engine_.get()); }
  ftr_engine* get() const { return engine_.get(); }

 private:
  explicit Engine(ftr_engine* e) : engine_(e, &ftr_close) {}
  std::unique_ptr<ftr_engine, void (*)(ftr_engine*)> engine_;
};

}  // namespace fluxtrim::runtime
#endif

#endif  /* FLUXTRIM_RUNTIME_H_ */
