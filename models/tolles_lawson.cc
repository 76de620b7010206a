#include "models/tolles_lawson.h"

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
// bound). Every compensation path (apply, stream, runtime) computes it here, so
// they agree to the bit.
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
  const int k = options_.half_width;
  ring_size_ = 1;
  while (ring_size_ < static_cast<std::size_t>(2 * k + 1)) ring_size_ *= 2;
  ring_mask_ = ring_size_ - 1;
  ring_.resize(ring_size_);
  aux_store_.assign(ring_size_ * aux_count_, 0.0);
  rows_.assign(static_cast<std::size_t>(max_outputs()) * term_count_, 0.0);
  coefficients_.assign(term_count_, 0.0);
  const double dt = 1.0 / options_.sample_rate_hz;
  for (int j = -k; j <= k; ++j) weights_.push_back(DerivativeWeight(k, j, dt));
}

void TermEngine::SetCoefficients(const double* coefficients) {
  coefficients_.assign(coefficients, coefficients + term_count_);
}

void TermEngine::Reset() {
  next_row_ = 0;
  next_index_ = 0;
  segments_ = 0;
  segment_length_ = 0;
  emitted_ = 0;
  last_time_ = 0.0;
}

int TermEngine::Emit(std::size_t position, bool derivative_valid,
                     Output* out) {
  const Pending& p = ring_[Slot(position)];
  Output& o = *out;
  o.index = p.index;
  o.segment = p.segment;
  o.time = p.time;
  o.bt = p.bt;
  o.f = p.f;
  o.flags = p.flags;
  // Local sums: the output may alias nothing the compiler can prove, so
  // accumulating in it would store on every window sample.
  double dc0 = 0.0, dc1 = 0.0, dc2 = 0.0;
  if (derivative_valid) {
    // Savitzky-Golay weights are odd (w_-j = -w_j, w_0 = 0): the slope is
    // sum_j w_j (c_{+j} - c_{-j}) over j = 1..k, half the multiplications
    // and a shorter chain of additions than the full window.
    const std::size_t k = static_cast<std::size_t>(options_.half_width);
    for (std::size_t j = 1; j <= k; ++j) {
      const Pending& a = ring_[Slot(position + j)];
      const Pending& b = ring_[Slot(position - j)];
      const double w = weights_[k + j];
      dc0 += w * (a.c[0] - b.c[0]);
      dc1 += w * (a.c[1] - b.c[1]);
      dc2 += w * (a.c[2] - b.c[2]);
    }
  } else {
    o.flags |= kFlagDerivativeInvalid;
  }
  o.c[0] = p.c[0];
  o.c[1] = p.c[1];
  o.c[2] = p.c[2];
  o.dc[0] = dc0;
  o.dc[1] = dc1;
  o.dc[2] = dc2;
  double* row = &rows_[static_cast<std::size_t>(next_row_++) * term_count_];
  const double* aux =
      aux_count_ ? &aux_store_[Slot(position) * aux_count_] : nullptr;
  FillTermRow(options_.terms, o.c, o.dc, o.bt, aux, row);
  o.row = row;
  o.interference = PartialSumDot(row, coefficients_.data(), term_count_);
  return 1;
}

int TermEngine::FlushSegment(Output* out, int n) {
  for (std::size_t q = emitted_; q < segment_length_; ++q) {
    n += Emit(q, false, out + n);
  }
  segment_length_ = 0;
  emitted_ = 0;
  return n;
}

int TermEngine::Push(double time, const double b[3], double f,
                     const double* aux, Output* out) {
  next_row_ = 0;
  int n = 0;
  const std::uint64_t index = next_index_++;
  const double norm2 = b[0] * b[0] + b[1] * b[1] + b[2] * b[2];
  // Decided on the square (the same outcome: sqrt keeps 0, inf and NaN), so
  // the branch need not wait for the square root.
  const bool good = std::isfinite(time) && std::isfinite(norm2) && norm2 > 0;
  const double norm = std::sqrt(norm2);
  bool gap = !good;
  if (good && segment_length_ > 0) {
    const double dt = time - last_time_;
    gap = !(dt > 0) || dt > max_step_s_;
  }
  const bool after_gap = gap || (index > 0 && segment_length_ == 0);
  if (gap && segment_length_ > 0) {
    ring_[Slot(segment_length_ - 1)].flags |= kFlagGapEdge;
    n = FlushSegment(out, n);
  }
  if (!good) {
    Output& o = out[n++];
    o = Output();
    o.index = index;
    o.segment = segments_++;
    o.time = time;
    o.f = f;
    o.bt = std::numeric_limits<double>::quiet_NaN();
    for (int i = 0; i < 3; ++i) {
      o.c[i] = std::numeric_limits<double>::quiet_NaN();
    }
    double* row = &rows_[static_cast<std::size_t>(next_row_++) * term_count_];
    for (std::size_t t = 0; t < term_count_; ++t) {
      row[t] = std::numeric_limits<double>::quiet_NaN();
    }
    o.row = row;
    o.interference = std::numeric_limits<double>::quiet_NaN();
    o.flags = kFlagBadSample | kFlagGapEdge | kFlagDerivativeInvalid;
    return n;
  }
  const std::size_t position = segment_length_++;
  if (position == 0) ++segments_;
  Pending& p = ring_[Slot(position)];
  p.index = index;
  p.segment = segments_ - 1;
  p.time = time;
  p.f = f;
  p.bt = std::isfinite(f) ? f : norm;
  for (int i = 0; i < 3; ++i) p.c[i] = b[i] / norm;
  p.flags = after_gap ? kFlagGapEdge : 0u;
  p.position = position;
  p.aux_offset = Slot(position) * aux_count_;
  for (std::size_t a = 0; a < aux_count_; ++a) {
    aux_store_[p.aux_offset + a] = aux[a];
  }
  last_time_ = time;
  const std::size_t k = static_cast<std::size_t>(options_.half_width);
  if (position >= k) {
    const std::size_t q = position - k;
    n += Emit(q, q >= k, out + n);
    emitted_ = q + 1;
  }
  return n;
}

int TermEngine::Flush(Output* out) {
  next_row_ = 0;
  return FlushSegment(out, 0);
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
  std::vector<TermEngine::Output> out(
      static_cast<std::size_t>(engine.max_outputs()));
  std::vector<double> aux_row(aux.size());
  auto store = [&m](const TermEngine::Output& o) {
    const std::size_t r = static_cast<std::size_t>(o.index);
    for (std::size_t c = 0; c < m.cols; ++c) {
      m.values[r * m.cols + c] = o.row[c];
    }
    m.bt[r] = o.bt;
    m.interference[r] = o.interference;
    m.flags[r] = o.flags;
  };
  const double nan = std::numeric_limits<double>::quiet_NaN();
  for (std::size_t i = 0; i < n; ++i) {
    const double b[3] = {bx[i], by[i], bz[i]};
    for (std::size_t a = 0; a < aux.size(); ++a) aux_row[a] = aux[a][i];
    const int ready = engine.Push(time[i], b, f ? f[i] : nan,
                                  aux_row.empty() ? nullptr : aux_row.data(),
                                  out.data());
    for (int r = 0; r < ready; ++r) store(out[static_cast<std::size_t>(r)]);
  }
  const int ready = engine.Flush(out.data());
  for (int r = 0; r < ready; ++r) store(out[static_cast<std::size_t>(r)]);
  return m;
}

}  // namespace fluxtrim::models
