#pragma once
// Tolles-Lawson terms (Tolles & Lawson 1950; Leliak 1961). Dependency-free:
// this one implementation serves fit, apply, stream and the runtime.
//
// Interference on the total field, with c = B/|B| the direction cosines of
// the fluxgate field in the body frame (x forward, y starboard, z down), c'
// their time derivative (1/s) and Bt the total field (nT):
//
//   H = sum_i a_i c_i                       permanent   perm_x..z      [nT]
//     + Bt sum_{i<=j} b_ij c_i c_j          induced     ind_xx..       [1]
//     + Bt sum_{i,j} e_ij c_i c'_j          eddy        eddy_xx..      [s]
//     + sum_k sum_i g_ki c_i a_k(t)         aux channel aux_<col>_x..  [nT/unit]
//
// Scaling: induced and eddy columns are multiplied by Bt, so their
// coefficients are dimensionless (induced) and in seconds (eddy); the
// coefficient of a column is reported in these physical units. Because
// sum c_i^2 = 1 one induced term is redundant (ind_zz is dropped) and because
// sum c_i c'_i = 0 one eddy term is (eddy_zz is dropped): 16 terms by
// default, 18 with `full`, which is then rank-deficient by two.
//
// Column order: perm_x perm_y perm_z, ind_xx ind_xy ind_xz ind_yy ind_yz
// [ind_zz], eddy_xx eddy_xy eddy_xz eddy_yx eddy_yy eddy_yz eddy_zx eddy_zy
// [eddy_zz], then aux_<col>_x aux_<col>_y aux_<col>_z for each aux channel.

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace fluxtrim::models {

struct TermOptions {
  bool permanent = true;
  bool induced = true;
  bool eddy = true;
  bool full = false;             // 18 terms: adds ind_zz and eddy_zz
  std::vector<std::string> aux;  // extra channels, e.g. {"i_motor"}
};

// Parses a --terms value: "default" (16), "full" (18), or a comma list of
// groups from {permanent, induced, eddy}, e.g. "permanent,induced".
// Throws std::invalid_argument naming the bad word.
TermOptions ParseTermSet(const std::string& spec);
// Inverse of ParseTermSet for the group part ("default", "full",
// "permanent,induced", ...).
std::string TermSetName(const TermOptions& options);

std::vector<std::string> TermNames(const TermOptions& options);
std::size_t TermCount(const TermOptions& options);

// Fills row[0..TermCount) for one sample.
//   c    direction cosines (unit vector), body frame
//   dc   time derivative of c, 1/s (zeros where the derivative is invalid)
//   bt   total field, nT
//   aux  one value per options.aux channel (may be null when there is none)
void FillTermRow(const TermOptions& options, const double c[3],
                 const double dc[3], double bt, const double* aux,
                 double* row);

// Per-sample flags, shared by apply, stream and the runtime.
enum SampleFlag : std::uint32_t {
  kFlagGapEdge = 1u << 0,             // first sample after, or last before, a gap
  kFlagDerivativeInvalid = 1u << 1,   // fewer than k samples on a side: c' = 0
  kFlagAttitudeOutside = 1u << 2,     // attitude outside the range the fit saw
  kFlagBadSample = 1u << 3,           // non-finite time or fluxgate: no output
};

// Centred smoothing derivative of half-width k (k >= 1): the slope at the
// centre of the least-squares cubic through 2k+1 equally spaced samples
// (Savitzky & Golay 1964, first derivative, polynomial order 3; order 2,
// i.e. the central difference, for k = 1):
//   x'(t) = sum_{j=-k..k} w_j x(t + j dt),
//   w_j = (S6 j - S4 j^3) / ((S2 S6 - S4^2) dt),  Sn = sum_{j=-k..k} j^n.
// A cubic keeps the gain of the operator flat across the fit's band (for
// k = 2 at 10 Hz: 0.996 at 0.9 Hz, where the linear slope gives 0.83), so
// the eddy terms of turbulence on survey lines are not under-estimated.
double DerivativeWeight(int half_width, int offset, double dt_s);

// Term engine: push samples one at a time (Push) or a block of columns at a
// time (PushBlock), get term rows back with a fixed delay of k samples. Both
// run the same code per sample (a block of one is a Push), so apply, stream,
// the runtime and the batch builder below agree to the bit.
//
// Segments: a gap ends a segment when the time step exceeds gap_factor
// times the nominal 1/sample_rate_hz, when time does not increase, or when a
// sample has a non-finite time or fluxgate component. A sample at position p
// of a segment of length L has a valid derivative iff p >= k and p + k < L;
// otherwise c' = 0 and kFlagDerivativeInvalid is set. The first sample after
// and the last before a gap carry kFlagGapEdge. A bad sample is emitted at
// once with kFlagBadSample and NaN interference.
//
// Outputs leave in input order, one per input sample. No allocation after
// construction.
class TermEngine {
 public:
  struct Options {
    TermOptions terms;
    int half_width = 2;           // k, samples
    double sample_rate_hz = 10.0;
    double gap_factor = 1.5;
  };

  struct Output {
    std::uint64_t index = 0;  // 0-based sequence number of the pushed sample
    std::uint64_t segment = 0;  // contiguous-segment number (a bad sample is
                                // a segment of its own)
    double time = 0.0;        // s
    double bt = 0.0;          // total field used, nT (f if finite, else |B|)
    double f = 0.0;           // scalar reading as pushed (NaN if none)
    double c[3] = {0, 0, 0};
    double dc[3] = {0, 0, 0};
    const double* row = nullptr;  // TermCount values; valid until next call
    double interference = 0.0;    // row . coefficients, nT (NaN if bad)
    std::uint32_t flags = 0;
  };

  // Where PushBlock and FlushBlock write their outputs: entry i of each
  // array is the i-th output of the call (sample index emitted() + i at the
  // call). Arrays hold max_block_outputs() entries (rows: that many rows of
  // term_count() values, row-major); a null array is not written.
  struct Columns {
    double* time = nullptr;
    double* bt = nullptr;
    double* f = nullptr;
    double* interference = nullptr;
    std::uint32_t* flags = nullptr;
    std::uint64_t* segment = nullptr;
    double* c = nullptr;     // 3 per output
    double* dc = nullptr;    // 3 per output
    double* rows = nullptr;  // term_count() per output
  };

  // Most samples one PushBlock takes.
  static constexpr std::size_t kMaxBlock = 256;

  explicit TermEngine(const Options& options);

  std::size_t term_count() const { return term_count_; }
  int half_width() const { return options_.half_width; }
  const Options& options() const { return options_; }
  // Largest number of outputs one Push or Flush can return.
  int max_outputs() const { return options_.half_width + 2; }
  // Largest number of outputs one PushBlock or FlushBlock can return.
  std::size_t max_block_outputs() const {
    return kMaxBlock + static_cast<std::size_t>(max_outputs());
  }
  // Samples pushed so far, and outputs returned so far (the index of the
  // next output).
  std::uint64_t pushed() const { return pushed_; }
  std::uint64_t emitted() const { return emitted_; }

  // Coefficients in physical units, term_count() values. Until set, the
  // interference of every output is 0.
  void SetCoefficients(const double* coefficients);

  // Pushes one sample. f is the scalar sensor reading or NaN; aux holds one
  // value per aux channel (may be null when there is none). Writes the
  // outputs now ready to out[0..n) in order and returns n (<= max_outputs()).
  int Push(double time, const double b[3], double f, const double* aux,
           Output* out);
  // End of input: emits every sample still pending.
  int Flush(Output* out);

  // Pushes samples [0, n) of columns, n <= kMaxBlock: the same outputs as n
  // calls of Push, bit for bit. f may be null (no scalar sensor: NaN); aux
  // holds one column per aux channel. Returns the number of outputs written.
  std::size_t PushBlock(std::size_t n, const double* time, const double* bx,
                        const double* by, const double* bz, const double* f,
                        const double* const* aux, const Columns& out);
  // End of input, into columns.
  std::size_t FlushBlock(const Columns& out);
  void Reset();

 private:
  // Takes one sample into the ring: segments, flags, direction cosines.
  void Append(double time, double b0, double b1, double b2, double f,
              const double* const* aux, std::size_t aux_row);
  // Computes outputs emitted_ .. ready_ - 1 into out, returns how many.
  std::size_t EmitReady(const Columns& out);
  std::size_t Slot(std::uint64_t index) const {
    return static_cast<std::size_t>(index) & ring_mask_;
  }

  Options options_;
  std::size_t term_count_ = 0;
  std::size_t aux_count_ = 0;
  double max_step_s_ = 0.0;      // gap_factor / sample_rate_hz
  // Samples by index & ring_mask_: a power-of-two ring of at least
  // kMaxBlock + 2k + 1 slots (a block, the k samples still waiting for
  // their successors and the k before them that a derivative reads).
  std::size_t ring_mask_ = 0;
  std::vector<double> time_, f_, bt_, cx_, cy_, cz_;
  std::vector<double> aux_;             // aux_count_ per slot
  std::vector<std::uint64_t> segment_;
  std::vector<std::uint32_t> flags_;
  std::vector<std::uint8_t> valid_;     // derivative valid
  std::vector<double> coefficients_;
  std::vector<double> weights_;         // derivative weights, 2k+1
  std::vector<double> row_;             // one row, when out.rows is null
  std::vector<const double*> aux_columns_;  // Push's aux values as columns
  // c, c' and Bt of the samples one EmitReady writes out (default terms).
  std::vector<double> block_c_[3], block_dc_[3], block_bt_;
  // Outputs of Push, as columns, then as Output.
  std::vector<double> one_time_, one_bt_, one_f_, one_interference_, one_c_,
      one_dc_, one_rows_;
  std::vector<std::uint32_t> one_flags_;
  std::vector<std::uint64_t> one_segment_;
  Columns one_;
  std::uint64_t pushed_ = 0;           // samples pushed
  std::uint64_t emitted_ = 0;          // samples emitted
  std::uint64_t ready_ = 0;            // samples that can be emitted
  std::uint64_t segments_ = 0;         // segments started so far
  std::size_t segment_length_ = 0;     // samples in the open segment
  double last_time_ = 0.0;
};

// Batch form over whole columns (fit, apply in memory, tests). Runs the
// TermEngine, so results equal the streaming ones. f may be null (no scalar
// sensor); aux holds one column pointer per options.terms.aux channel.
struct TermMatrix {
  std::size_t rows = 0, cols = 0;
  std::vector<double> values;       // row-major, rows * cols
  std::vector<double> bt;           // nT
  std::vector<double> interference; // with the given coefficients, or 0
  std::vector<std::uint32_t> flags;
};
TermMatrix BuildTermMatrix(const TermEngine::Options& options, std::size_t n,
                           const double* time, const double* bx,
                           const double* by, const double* bz,
                           const double* f,
                           const std::vector<const double*>& aux,
                           const double* coefficients = nullptr);

}  // namespace fluxtrim::models
