/* Example for integrators: compensate a CSV stream with the fluxtrim
 * runtime, in plain C.
 *
 *   compensate_csv MODEL < in.csv > out.csv
 *
 * Input: a header line, then lines "time,bx,by,bz,f" (f may be empty when
 * the model was fitted without a scalar sensor). Output: "time,f_comp,
 * f_interference,flags", each line k samples after its input (the latency
 * the engine states), and the last k lines at end of input.
 * Real integrations read the sensors instead of stdin; the calls are the
 * same: ftr_open_file once, ftr_push per sample, ftr_flush at the end.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "src/runtime/fluxtrim_runtime.h"

static void print_outputs(const ftr_output* out, int n) {
  for (int i = 0; i < n; ++i) {
    printf("%.17g,%.17g,%.17g,%u\n", out[i].time, out[i].f_comp,
           out[i].f_interference, out[i].flags);
  }
}

int main(int argc, char** argv) {
  if (argc != 2) {
    fprintf(stderr, "usage: %s MODEL < in.csv > out.csv\n", argv[0]);
    return 2;
  }
  char error[512];
  ftr_engine* engine = ftr_open_file(argv[1], error, sizeof error);
  if (!engine) {
    fprintf(stderr, "error: %s\n", error);
    return 1;
  }
  if (ftr_aux_count(engine) > 0) {
    fprintf(stderr, "error: this example does not read aux channels\n");
    ftr_close(engine);
    return 1;
  }
  fprintf(stderr, "latency %d samples (derivative half-width %d) at %g Hz\n",
          ftr_latency_samples(engine), ftr_half_width(engine),
          ftr_sample_rate_hz(engine));
  /* Sized once: no allocation per sample. */
  const int capacity = ftr_max_outputs(engine);
  ftr_output* out = malloc(sizeof(ftr_output) * (size_t)capacity);
  char line[1024];
  if (!fgets(line, sizeof line, stdin)) { /* header */
    free(out);
    ftr_close(engine);
    return 1;
  }
  printf("time,f_comp,f_interference,flags\n");
  while (fgets(line, sizeof line, stdin)) {
    ftr_sample s = {0};
    s.f = NAN;
    s.roll_deg = s.pitch_deg = s.temp_c = NAN;
    if (sscanf(line, "%lf,%lf,%lf,%lf,%lf", &s.time, &s.bx, &s.by, &s.bz,
               &s.f) < 4) {
      fprintf(stderr, "error: cannot read line: %s", line);
      break;
    }
    print_outputs(out, ftr_push(engine, &s, out, capacity));
  }
  print_outputs(out, ftr_flush(engine, out, capacity));
  free(out);
  ftr_close(engine);
  return 0;
}
