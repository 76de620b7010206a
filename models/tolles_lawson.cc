#include "models/tolles_lawson.h"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <limits>
#include <sstream>
#include <stdexcept>

#include "models/huge_pages.h"

namespace fluxtrim::models {
namespace {

constexpr char kAxis[3] = {'x', 'y', 'z'};

std::string Trim(const std::string& s) {
  const auto b = s.find_first_not_of(" \t");
  if (b == std::string::npos) return "";
  const auto e = s.find_last_not_of(" \t");
  return s.substr(b, e - b + 1);
}

}  // namespace

TermOptions ParseTermSet(const std::string& spec) {
  TermOptions options;
  const std::string s = Trim(spec);
  if (s.empty() || s == "default") return options;
  if (s == "full") {
    options.full = true;
    return options;
  }
  options.permanent = options.induced = options.eddy = false;
  std::stringstream words(s);
  std::string word;
  while (std::getline(words, word, ',')) {
    word = Trim(word);
    if (word == "permanent") {
      options.permanent = true;
    } else if (word == "induced") {
      options.induced = true;
    } else if (word == "eddy") {
      options.eddy = true;
    } else {
      throw std::invalid_argument(
          "unknown term group '" + word +
          "': expected default, full, or a comma list of permanent, induced, "
          "eddy");
    }
  }
  return options;
}

std::string TermSetName(const TermOptions& o) {
  if (o.permanent && o.induced && o.eddy) return o.full ? "full" : "default";
  std::string name;
  auto add = [&name](const char* group) {
    if (!name.empty()) name += ",";
    name += group;
  };
  if (o.permanent) add("permanent");
  if (o.induced) add("induced");
  if (o.eddy) add("eddy");
  return name;
}

std::vector<std::string> TermNames(const TermOptions& o) {
  std::vector<std::string> names;
  if (o.permanent) {
    for (char a : kAxis) names.push_back(std::string("perm_") + a);
  }
  if (o.induced) {
    for (int i = 0; i < 3; ++i) {
      for (int j = i; j < 3; ++j) {
        if (i == 2 && j == 2 && !o.full) continue;
        names.push_back(std::string("ind_") + kAxis[i] + kAxis[j]);
      }
    }
  }
  if (o.eddy) {
    for (int i = 0; i < 3; ++i) {
      for (int j = 0; j < 3; ++j) {
        if (i == 2 && j == 2 && !o.full) continue;
        names.push_back(std::string("eddy_") + kAxis[i] + kAxis[j]);
      }
    }
  }
  for (const std::string& aux : o.aux) {
    for (char a : kAxis) names.push_back("aux_" + aux + "_" + a);
  }
  return names;
}

std::size_t TermCount(const TermOptions& o) {
  const std::size_t induced = o.full ? 6 : 5;
  const std::size_t eddy = o.full ? 9 : 8;
  return (o.permanent ? 3 : 0) + (o.induced ? induced : 0) +
         (o.eddy ? eddy : 0) + 3 * o.aux.size();
}

void FillTermRow(const TermOptions& o, const double c[3], const double dc[3],
                 double bt, const double* aux, double* row) {
  std::size_t k = 0;
  if (o.permanent) {
    for (int i = 0; i < 3; ++i) row[k++] = c[i];
  }
  if (o.induced) {
    for (int i = 0; i < 3; ++i) {
      for (int j = i; j < 3; ++j) {
        if (i == 2 && j == 2 && !o.full) continue;
        row[k++] = bt * c[i] * c[j];
      }
    }
  }
  if (o.eddy) {
    for (int i = 0; i < 3; ++i) {
      for (int j = 0; j < 3; ++j) {
        if (i == 2 && j == 2 && !o.full) continue;
        row[k++] = bt * c[i] * dc[j];
      }
    }
  }
  for (std::size_t a = 0; a < o.aux.size(); ++a) {
    for (int i = 0; i < 3; ++i) row[k++] = c[i] * aux[a];
  }
}

namespace {

// row . coef in four partial sums (one serial chain of additions was latency
// bound). Every row the engine builds is summed here, and
// DefaultInterference keeps the same order for the default set, so apply,
// stream and the runtime agree to the bit.
inline double PartialSumDot(const double* row, const double* coef,
                            std::size_t n) {
  double h0 = 0.0, h1 = 0.0, h2 = 0.0, h3 = 0.0;
  const std::size_t whole = n - n % 4;
  for (std::size_t t = 0; t < whole; t += 4) {
    h0 += row[t] * coef[t];
    h1 += row[t + 1] * coef[t + 1];
    h2 += row[t + 2] * coef[t + 2];
    h3 += row[t + 3] * coef[t + 3];
  }
  for (std::size_t t = whole; t < n; ++t) h0 += row[t] * coef[t];
  return (h0 + h1) + (h2 + h3);
}

}  // namespace

double DerivativeWeight(int half_width, int offset, double dt_s) {
  // Savitzky & Golay (1964): fit a + b j + c j^2 + d j^3 to the window; on a
  // symmetric window the slope b comes from the odd part alone:
  //   [S2 S4; S4 S6] [b d]' = [sum j x_j, sum j^3 x_j]',  Sn = sum j^n,
  // so w_j = (S6 j - S4 j^3) / (S2 S6 - S4^2) / dt. For k = 1 the cubic is
  // not determined by three samples and the quadratic (central difference)
  // is used: w_j = j / (S2 dt).
  const double k = half_width, j = offset;
  const double s2 = k * (k + 1) * (2 * k + 1) / 3.0;
  if (half_width < 2) return j / (dt_s * s2);
  double s4 = 0, s6 = 0;
  for (int i = 1; i <= half_width; ++i) {
    const double i2 = static_cast<double>(i) * i;
    s4 += 2 * i2 * i2;
    s6 += 2 * i2 * i2 * i2;
  }
  return (s6 * j - s4 * j * j * j) / ((s2 * s6 - s4 * s4) * dt_s);
}

TermEngine::TermEngine(const Options& options) : options_(options) {
  if (options_.half_width < 1) {
    throw std::invalid_argument("derivative half-width must be at least 1");
  }
  if (!(options_.sample_rate_hz > 0) || !std::isfinite(options_.sample_rate_hz)) {
    throw std::invalid_argument("sample rate must be positive");
  }
  term_count_ = TermCount(options_.terms);
  aux_count_ = options_.terms.aux.size();
  max_step_s_ = options_.gap_factor / options_.sample_rate_hz;
  const std::size_t k = static_cast<std::size_t>(options_.half_width);
  std::size_t slots = 1;
  while (slots < kMaxBlock + 2 * k + 1) slots *= 2;
  ring_mask_ = slots - 1;
  for (std::vector<double>* v : {&time_, &f_, &bt_, &cx_, &cy_, &cz_}) {
    v->assign(slots, 0.0);
  }
  aux_.assign(slots * aux_count_, 0.0);
  segment_.assign(slots, 0);
  flags_.assign(slots, 0);
  valid_.assign(slots, 0);
  coefficients_.assign(term_count_, 0.0);
  row_.assign(term_count_, 0.0);
  aux_columns_.assign(aux_count_, nullptr);
  for (int a = 0; a < 3; ++a) {
    block_c_[a].assign(max_block_outputs(), 0.0);
    block_dc_[a].assign(max_block_outputs(), 0.0);
  }
  block_bt_.assign(max_block_outputs(), 0.0);
  const double dt = 1.0 / options_.sample_rate_hz;
  for (int j = -options_.half_width; j <= options_.half_width; ++j) {
    weights_.push_back(DerivativeWeight(options_.half_width, j, dt));
  }
  const std::size_t m = static_cast<std::size_t>(max_outputs());
  for (std::vector<double>* v :
       {&one_time_, &one_bt_, &one_f_, &one_interference_}) {
    v->assign(m, 0.0);
  }
  one_c_.assign(3 * m, 0.0);
  one_dc_.assign(3 * m, 0.0);
  one_rows_.assign(m * term_count_, 0.0);
  one_flags_.assign(m, 0);
  one_segment_.assign(m, 0);
  one_ = {one_time_.data(), one_bt_.data(), one_f_.data(),
          one_interference_.data(), one_flags_.data(), one_segment_.data(),
          one_c_.data(), one_dc_.data(), one_rows_.data()};
}

void TermEngine::SetCoefficients(const double* coefficients) {
  coefficients_.assign(coefficients, coefficients + term_count_);
}

void TermEngine::Reset() {
  pushed_ = 0;
  emitted_ = 0;
  ready_ = 0;
  segments_ = 0;
  segment_length_ = 0;
  last_time_ = 0.0;
}

inline void TermEngine::Append(double time, double b0, double b1, double b2,
                               double f, const double* const* aux,
                               std::size_t aux_row) {
  const std::uint64_t index = pushed_++;
  const std::size_t q = Slot(index);
  const double norm2 = b0 * b0 + b1 * b1 + b2 * b2;
  // Decided on the square (the same outcome: sqrt keeps 0, inf and NaN), so
  // the branch need not wait for the square root.
  const bool good = std::isfinite(time) && std::isfinite(norm2) && norm2 > 0;
  bool gap = !good;
  if (good && segment_length_ > 0) {
    const double dt = time - last_time_;
    gap = !(dt > 0) || dt > max_step_s_;
  }
  const bool after_gap = gap || (index > 0 && segment_length_ == 0);
  if (gap && segment_length_ > 0) {
    // The open segment ends: its last sample is a gap edge, and every
    // sample of it can leave (those without k successors with c' = 0).
    flags_[Slot(index - 1)] |= kFlagGapEdge;
    segment_length_ = 0;
    ready_ = index;
  }
  time_[q] = time;
  f_[q] = f;
  valid_[q] = 0;
  for (std::size_t a = 0; a < aux_count_; ++a) {
    aux_[q * aux_count_ + a] = aux[a][aux_row];
  }
  if (!good) {
    constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
    segment_[q] = segments_++;
    bt_[q] = cx_[q] = cy_[q] = cz_[q] = kNaN;
    flags_[q] = kFlagBadSample | kFlagGapEdge | kFlagDerivativeInvalid;
    ready_ = index + 1;
    return;
  }
  const double norm = std::sqrt(norm2);
  const std::size_t position = segment_length_++;
  if (position == 0) ++segments_;
  segment_[q] = segments_ - 1;
  bt_[q] = std::isfinite(f) ? f : norm;
  cx_[q] = b0 / norm;
  cy_[q] = b1 / norm;
  cz_[q] = b2 / norm;
  flags_[q] = after_gap ? kFlagGapEdge : 0u;
  last_time_ = time;
  const std::size_t k = static_cast<std::size_t>(options_.half_width);
  if (position >= k) {
    // The sample k back now has its successors.
    valid_[Slot(index - k)] = position >= 2 * k;
    ready_ = index - k + 1;
  }
}

namespace {

// Interference of the default 16-term row (tolles_lawson.h column order)
// for samples [0, n) of columns: the products of FillTermRow and the sums
// of PartialSumDot in the same order, so the result is the same to the bit;
// written out without the row, a loop the compiler can run on several
// samples at once.
void DefaultInterference(std::size_t n, const double* cx, const double* cy,
                         const double* cz, const double* dx, const double* dy,
                         const double* dz, const double* bt,
                         const double* k, double* out) {
  for (std::size_t i = 0; i < n; ++i) {
    const double x = cx[i], y = cy[i], z = cz[i];
    const double bx = bt[i] * x, by = bt[i] * y, bz = bt[i] * z;
    double h0 = 0.0, h1 = 0.0, h2 = 0.0, h3 = 0.0;
    h0 += x * k[0];
    h1 += y * k[1];
    h2 += z * k[2];
    h3 += bx * x * k[3];
    h0 += bx * y * k[4];
    h1 += bx * z * k[5];
    h2 += by * y * k[6];
    h3 += by * z * k[7];
    h0 += bx * dx[i] * k[8];
    h1 += bx * dy[i] * k[9];
    h2 += bx * dz[i] * k[10];
    h3 += by * dx[i] * k[11];
    h0 += by * dy[i] * k[12];
    h1 += by * dz[i] * k[13];
    h2 += bz * dx[i] * k[14];
    h3 += bz * dy[i] * k[15];
    out[i] = (h0 + h1) + (h2 + h3);
  }
}

}  // namespace

std::size_t TermEngine::EmitReady(const Columns& out) {
  const std::size_t k = static_cast<std::size_t>(options_.half_width);
  const double* w = weights_.data() + k;
  // The default term set without rows goes through DefaultInterference;
  // anything else builds each row with FillTermRow.
  const TermOptions& t = options_.terms;
  const bool written_out = !out.rows && out.interference && t.permanent &&
                           t.induced && t.eddy && !t.full && aux_count_ == 0;
  std::size_t n = 0;
  for (; emitted_ < ready_; ++emitted_, ++n) {
    const std::uint64_t s = emitted_;
    const std::size_t q = Slot(s);
    const double c[3] = {cx_[q], cy_[q], cz_[q]};
    // Savitzky-Golay weights are odd (w_-j = -w_j, w_0 = 0): the slope is
    // sum_j w_j (c_{+j} - c_{-j}) over j = 1..k, half the multiplications
    // and a shorter chain of additions than the full window.
    double dc[3] = {0.0, 0.0, 0.0};
    std::uint32_t flags = flags_[q];
    if (valid_[q]) {
      for (std::size_t j = 1; j <= k; ++j) {
        const std::size_t a = Slot(s + j), b = Slot(s - j);
        dc[0] += w[j] * (cx_[a] - cx_[b]);
        dc[1] += w[j] * (cy_[a] - cy_[b]);
        dc[2] += w[j] * (cz_[a] - cz_[b]);
      }
    } else {
      flags |= kFlagDerivativeInvalid;
    }
    const double bt = bt_[q];
    if (written_out) {
      block_c_[0][n] = c[0];
      block_c_[1][n] = c[1];
      block_c_[2][n] = c[2];
      block_dc_[0][n] = dc[0];
      block_dc_[1][n] = dc[1];
      block_dc_[2][n] = dc[2];
      block_bt_[n] = bt;
    } else {
      double* row = out.rows ? out.rows + n * term_count_ : row_.data();
      FillTermRow(t, c, dc, bt, aux_count_ ? &aux_[q * aux_count_] : nullptr,
                  row);
      if (out.interference) {
        out.interference[n] =
            PartialSumDot(row, coefficients_.data(), term_count_);
      }
    }
    if (out.time) out.time[n] = time_[q];
    if (out.bt) out.bt[n] = bt;
    if (out.f) out.f[n] = f_[q];
    if (out.flags) out.flags[n] = flags;
    if (out.segment) out.segment[n] = segment_[q];
    if (out.c) std::copy(c, c + 3, out.c + 3 * n);
    if (out.dc) std::copy(dc, dc + 3, out.dc + 3 * n);
  }
  if (written_out) {
    DefaultInterference(n, block_c_[0].data(), block_c_[1].data(),
                        block_c_[2].data(), block_dc_[0].data(),
                        block_dc_[1].data(), block_dc_[2].data(),
                        block_bt_.data(), coefficients_.data(),
                        out.interference);
  }
  return n;
}

std::size_t TermEngine::PushBlock(std::size_t n, const double* time,
                                  const double* bx, const double* by,
                                  const double* bz, const double* f,
                                  const double* const* aux,
                                  const Columns& out) {
  if (n > kMaxBlock) {
    throw std::invalid_argument("TermEngine::PushBlock: block longer than kMaxBlock");
  }
  constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
  for (std::size_t i = 0; i < n; ++i) {
    Append(time[i], bx[i], by[i], bz[i], f ? f[i] : kNaN, aux, i);
  }
  return EmitReady(out);
}

std::size_t TermEngine::FlushBlock(const Columns& out) {
  segment_length_ = 0;
  ready_ = pushed_;
  return EmitReady(out);
}

namespace {

// Columns of engine outputs as Output records (Push and Flush).
int ToOutputs(const TermEngine::Columns& c, std::size_t n,
              std::uint64_t first_index, std::size_t term_count,
              TermEngine::Output* out) {
  for (std::size_t i = 0; i < n; ++i) {
    TermEngine::Output& o = out[i];
    o.index = first_index + i;
    o.segment = c.segment[i];
    o.time = c.time[i];
    o.bt = c.bt[i];
    o.f = c.f[i];
    for (int a = 0; a < 3; ++a) {
      o.c[a] = c.c[3 * i + static_cast<std::size_t>(a)];
      o.dc[a] = c.dc[3 * i + static_cast<std::size_t>(a)];
    }
    o.row = c.rows + i * term_count;
    o.interference = c.interference[i];
    o.flags = c.flags[i];
  }
  return static_cast<int>(n);
}

}  // namespace

int TermEngine::Push(double time, const double b[3], double f,
                     const double* aux, Output* out) {
  const std::uint64_t first = emitted_;
  // aux is one value per channel: channel a is the column aux + a, row 0.
  for (std::size_t a = 0; a < aux_count_; ++a) aux_columns_[a] = aux + a;
  Append(time, b[0], b[1], b[2], f, aux_columns_.data(), 0);
  return ToOutputs(one_, EmitReady(one_), first, term_count_, out);
}

int TermEngine::Flush(Output* out) {
  const std::uint64_t first = emitted_;
  return ToOutputs(one_, FlushBlock(one_), first, term_count_, out);
}

TermMatrix BuildTermMatrix(const TermEngine::Options& options, std::size_t n,
                           const double* time, const double* bx,
                           const double* by, const double* bz,
                           const double* f,
                           const std::vector<const double*>& aux,
                           const double* coefficients) {
  TermEngine engine(options);
  if (coefficients) engine.SetCoefficients(coefficients);
  TermMatrix m;
  m.rows = n;
  m.cols = engine.term_count();
  m.values.reserve(n * m.cols);  // allocated, not yet touched
  AdviseHugePages(m.values.data(), n * m.cols * sizeof(double));
  m.values.assign(n * m.cols, 0.0);
  m.bt.assign(n, 0.0);
  m.interference.assign(n, 0.0);
  m.flags.assign(n, 0u);
  // Outputs leave in input order, one per sample: each block's outputs go
  // straight to their rows.
  auto columns_at = [&m](std::uint64_t index) {
    const std::size_t r = static_cast<std::size_t>(index);
    TermEngine::Columns c;
    c.rows = m.values.data() + r * m.cols;
    c.bt = m.bt.data() + r;
    c.interference = m.interference.data() + r;
    c.flags = m.flags.data() + r;
    return c;
  };
  std::vector<const double*> aux_block(aux.size());
  for (std::size_t i = 0; i < n; i += TermEngine::kMaxBlock) {
    const std::size_t len = std::min(TermEngine::kMaxBlock, n - i);
    for (std::size_t a = 0; a < aux.size(); ++a) aux_block[a] = aux[a] + i;
    engine.PushBlock(len, time + i, bx + i, by + i, bz + i, f ? f + i : nullptr,
                     aux_block.data(), columns_at(engine.emitted()));
  }
  engine.FlushBlock(columns_at(engine.emitted()));
  return m;
}

}  // namespace fluxtrim::models
