// PushBlock against Push: apply pushes blocks of columns, stream and the
// runtime push one sample at a time, and both must give the same outputs to
// the bit, whatever the block sizes. The inputs are built to reach every
// branch: gaps, time going back, repeated times, bad fluxgate samples,
// missing scalar readings and attitude, segments shorter than the
// derivative window, blocks of one and of the largest size.

#include <cmath>
#include <cstdint>
#include <cstring>
#include <limits>
#include <ostream>
#include <random>
#include <vector>

#include <gtest/gtest.h>

#include "models/compensator.h"
#include "models/tolles_lawson.h"

namespace fluxtrim::models {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();

// Equal to the bit (NaN equal to NaN of the same pattern).
bool SameBits(double a, double b) {
  return std::memcmp(&a, &b, sizeof a) == 0;
}

struct Recording {
  std::vector<double> time, bx, by, bz, f, roll, pitch, temp;
  std::vector<std::vector<double>> aux;
};

Recording TrickyRecording(std::size_t n, std::size_t aux_count,
                          unsigned seed) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  Recording r;
  r.aux.assign(aux_count, {});
  double t = 1000.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double p = u(rng);
    if (p < 0.01) {
      t += 0.5;  // gap
    } else if (p < 0.015) {
      t -= 0.2;  // time goes back
    } else if (p > 0.99) {
      // repeated time: no step
    } else {
      t += 0.1;
    }
    // Short segments in a row now and then: gaps every few samples.
    if (i % 997 < 12 && i % 3 == 0) t += 0.4;
    const double s = static_cast<double>(i);
    double bx = 21000.0 + 800.0 * std::sin(0.031 * s);
    double by = 600.0 * std::cos(0.047 * s);
    double bz = -44000.0 + 300.0 * std::sin(0.013 * s);
    const double q = u(rng);
    if (q < 0.004) bx = kNaN;
    else if (q < 0.006) by = kInf;
    else if (q < 0.007) bx = by = bz = 0.0;
    r.time.push_back(i % 1499 == 700 ? kNaN : t);
    r.bx.push_back(bx);
    r.by.push_back(by);
    r.bz.push_back(bz);
    r.f.push_back(u(rng) < 0.01 ? kNaN
                                : std::sqrt(bx * bx + by * by + bz * bz) + 7.0);
    r.roll.push_back(u(rng) < 0.02 ? 31.0 : (u(rng) < 0.01 ? kNaN : 2.0));
    r.pitch.push_back(u(rng) < 0.02 ? -14.0 : 1.0);
    r.temp.push_back(15.0 + 10.0 * u(rng));
    for (std::size_t a = 0; a < aux_count; ++a) {
      r.aux[a].push_back(20.0 + std::sin(0.2 * s + static_cast<double>(a)));
    }
  }
  return r;
}

struct Config {
  double lag_s;
  int half_width;
  std::size_t aux;
  bool full;
  bool sensor;
  bool scalar;
};

void PrintTo(const Config& c, std::ostream* os) {
  *os << "lag " << c.lag_s << " s, k " << c.half_width << ", " << c.aux
      << " aux, " << (c.full ? "full" : "default") << (c.sensor ? ", sensor" : "")
      << (c.scalar ? "" : ", fluxgate only");
}

CompensatorModel ModelFor(const Config& c) {
  CompensatorModel m;
  m.engine.sample_rate_hz = 10.0;
  m.engine.half_width = c.half_width;
  m.engine.terms.full = c.full;
  for (std::size_t a = 0; a < c.aux; ++a) {
    m.engine.terms.aux.push_back("i" + std::to_string(a));
  }
  const std::size_t terms = TermCount(m.engine.terms);
  for (std::size_t t = 0; t < terms; ++t) {
    m.coefficients.push_back(0.3 + 1e-3 * static_cast<double>(t * t) -
                             (t % 3 == 0 ? 0.7 : 0.0));
  }
  m.lag_s = c.lag_s;
  m.interference_mean_nT = 4.25;
  m.has_attitude_range = true;
  m.roll_min_deg = -20;
  m.roll_max_deg = 20;
  m.pitch_min_deg = -10;
  m.pitch_max_deg = 10;
  m.scalar_sensor = c.scalar;
  if (c.sensor) {
    m.has_sensor = true;
    m.sensor.gains[1] = 1.0004;
    m.sensor.offsets_nT[2] = -12.5;
    m.sensor.nonorthogonality_rad[0] = 2e-4;
    m.sensor.misalignment_rad[2] = -3e-4;
    m.sensor.gain_tc_per_K[0] = 1e-5;
    m.sensor.offset_tc_nT_per_K[1] = 0.2;
  }
  return m;
}

class BlockPush : public ::testing::TestWithParam<Config> {};

TEST_P(BlockPush, CompensatorBlocksEqualSinglePushesBitForBit) {
  const Config config = GetParam();
  const CompensatorModel model = ModelFor(config);
  const std::size_t n = 6000;
  const Recording r = TrickyRecording(n, config.aux, 17);

  // One sample at a time, rows kept.
  Compensator single(model);
  single.KeepTermRows();
  std::vector<CompensatedSample> one(
      static_cast<std::size_t>(single.max_outputs()));
  std::vector<CompensatedSample> expected;
  std::vector<std::vector<double>> expected_rows;
  std::vector<double> aux_row(config.aux);
  auto keep = [&](int k) {
    for (int i = 0; i < k; ++i) {
      const CompensatedSample& s = one[static_cast<std::size_t>(i)];
      expected.push_back(s);
      const double* row = single.TermRow(s.index);
      expected_rows.emplace_back(row, row + single.term_count());
    }
  };
  for (std::size_t i = 0; i < n; ++i) {
    const double b[3] = {r.bx[i], r.by[i], r.bz[i]};
    for (std::size_t a = 0; a < config.aux; ++a) aux_row[a] = r.aux[a][i];
    keep(single.Push(r.time[i], b, r.f[i],
                     config.aux ? aux_row.data() : nullptr, r.roll[i],
                     r.pitch[i], r.temp[i], one.data()));
  }
  keep(single.Flush(one.data()));
  ASSERT_EQ(expected.size(), n);
  // The recording reaches every flag (and so every branch that sets one).
  std::uint32_t seen_flags = 0;
  for (const CompensatedSample& s : expected) seen_flags |= s.flags;
  std::uint32_t wanted = kFlagGapEdge | kFlagDerivativeInvalid |
                         kFlagAttitudeOutside | kFlagBadSample;
  if (config.lag_s != 0.0) wanted |= kFlagLagEdge;
  EXPECT_EQ(seen_flags & wanted, wanted);

  // Blocks of random sizes, 1 to kMaxBlock; with rows kept (every term set
  // builds its rows) and without (the default set's written-out sum).
  for (const bool keep_rows : {true, false}) {
  SCOPED_TRACE(keep_rows ? "rows kept" : "no rows");
  Compensator block(model);
  if (keep_rows) block.KeepTermRows();
  const std::size_t m = block.max_block_outputs();
  std::vector<double> time(m), f_comp(m), f_int(m), bt(m);
  std::vector<std::uint32_t> flags(m);
  const CompensatedColumns out{time.data(), f_comp.data(), f_int.data(),
                               bt.data(), flags.data()};
  std::mt19937 rng(5);
  std::uniform_int_distribution<std::size_t> size(1, Compensator::kMaxBlock);
  std::vector<const double*> aux(config.aux);
  std::size_t seen = 0;
  auto check = [&](std::size_t k) {
    for (std::size_t i = 0; i < k; ++i, ++seen) {
      ASSERT_LT(seen, n);
      const CompensatedSample& e = expected[seen];
      EXPECT_EQ(e.index, seen);
      EXPECT_TRUE(SameBits(time[i], e.time)) << seen;
      EXPECT_TRUE(SameBits(f_comp[i], e.f_comp)) << seen;
      EXPECT_TRUE(SameBits(f_int[i], e.f_interference)) << seen;
      EXPECT_TRUE(SameBits(bt[i], e.bt)) << seen;
      EXPECT_EQ(flags[i], e.flags) << seen;
      if (!keep_rows) continue;
      const double* row = block.TermRow(seen);
      for (std::size_t t = 0; t < block.term_count(); ++t) {
        EXPECT_TRUE(SameBits(row[t], expected_rows[seen][t])) << seen << "," << t;
      }
    }
  };
  std::size_t i = 0;
  while (i < n) {
    // Blocks of one, of the largest size and of random sizes in turn.
    std::size_t len = size(rng);
    if (i % 7 == 0) len = 1;
    if (i % 11 == 0) len = Compensator::kMaxBlock;
    len = std::min(len, n - i);
    SampleColumns in;
    in.time = &r.time[i];
    in.bx = &r.bx[i];
    in.by = &r.by[i];
    in.bz = &r.bz[i];
    in.f = &r.f[i];
    in.roll_deg = &r.roll[i];
    in.pitch_deg = &r.pitch[i];
    in.temp_c = &r.temp[i];
    for (std::size_t a = 0; a < config.aux; ++a) aux[a] = &r.aux[a][i];
    in.aux = aux.data();
    const std::size_t first = static_cast<std::size_t>(block.emitted());
    ASSERT_EQ(first, seen);
    const std::size_t k = block.PushBlock(len, in, out);
    ASSERT_LE(k, m);
    check(k);
    i += len;
  }
  check(block.FlushBlock(out));
  EXPECT_EQ(seen, n);
  }
}

INSTANTIATE_TEST_SUITE_P(
    Models, BlockPush,
    ::testing::Values(Config{0.0, 2, 0, false, false, true},
                      Config{0.0, 2, 2, false, false, true},
                      Config{0.0, 1, 0, true, false, true},
                      Config{0.0, 3, 0, false, true, false},
                      Config{0.013, 2, 0, false, false, true},
                      Config{-0.027, 2, 1, false, true, true},
                      Config{0.35, 2, 0, false, false, true},
                      Config{-0.25, 4, 0, true, false, true},
                      Config{2.6, 2, 0, false, false, true}));

TEST(TermEngineBlock, BlocksEqualSinglePushesInEveryColumn) {
  TermEngine::Options o;
  o.half_width = 3;
  o.terms.aux = {"i"};
  const std::size_t n = 4000;
  const Recording r = TrickyRecording(n, 1, 29);
  std::vector<double> coef(TermCount(o.terms));
  for (std::size_t t = 0; t < coef.size(); ++t) coef[t] = 0.1 * static_cast<double>(t) - 0.4;

  TermEngine single(o);
  single.SetCoefficients(coef.data());
  std::vector<TermEngine::Output> one(static_cast<std::size_t>(single.max_outputs()));
  std::vector<TermEngine::Output> expected;
  std::vector<std::vector<double>> rows;
  auto keep = [&](int k) {
    for (int i = 0; i < k; ++i) {
      const TermEngine::Output& o1 = one[static_cast<std::size_t>(i)];
      expected.push_back(o1);
      rows.emplace_back(o1.row, o1.row + single.term_count());
    }
  };
  for (std::size_t i = 0; i < n; ++i) {
    const double b[3] = {r.bx[i], r.by[i], r.bz[i]};
    keep(single.Push(r.time[i], b, r.f[i], &r.aux[0][i], one.data()));
  }
  keep(single.Flush(one.data()));
  ASSERT_EQ(expected.size(), n);

  TermEngine block(o);
  block.SetCoefficients(coef.data());
  const std::size_t m = block.max_block_outputs(), tc = block.term_count();
  std::vector<double> time(m), bt(m), f(m), h(m), c(3 * m), dc(3 * m),
      row(m * tc);
  std::vector<std::uint32_t> flags(m);
  std::vector<std::uint64_t> segment(m);
  const TermEngine::Columns out{time.data(), bt.data(), f.data(), h.data(),
                                flags.data(), segment.data(), c.data(),
                                dc.data(), row.data()};
  std::size_t seen = 0;
  auto check = [&](std::size_t k) {
    for (std::size_t i = 0; i < k; ++i, ++seen) {
      const TermEngine::Output& e = expected[seen];
      EXPECT_EQ(e.index, seen);
      EXPECT_EQ(segment[i], e.segment) << seen;
      EXPECT_EQ(flags[i], e.flags) << seen;
      EXPECT_TRUE(SameBits(time[i], e.time)) << seen;
      EXPECT_TRUE(SameBits(bt[i], e.bt)) << seen;
      EXPECT_TRUE(SameBits(f[i], e.f)) << seen;
      EXPECT_TRUE(SameBits(h[i], e.interference)) << seen;
      for (std::size_t a = 0; a < 3; ++a) {
        EXPECT_TRUE(SameBits(c[3 * i + a], e.c[a])) << seen;
        EXPECT_TRUE(SameBits(dc[3 * i + a], e.dc[a])) << seen;
      }
      for (std::size_t t = 0; t < tc; ++t) {
        EXPECT_TRUE(SameBits(row[i * tc + t], rows[seen][t])) << seen;
      }
    }
  };
  const double* aux[1];
  for (std::size_t i = 0; i < n;) {
    const std::size_t len = std::min<std::size_t>(1 + (i * 37) % TermEngine::kMaxBlock, n - i);
    aux[0] = &r.aux[0][i];
    check(block.PushBlock(len, &r.time[i], &r.bx[i], &r.by[i], &r.bz[i],
                          &r.f[i], aux, out));
    i += len;
  }
  check(block.FlushBlock(out));
  EXPECT_EQ(seen, n);
}

TEST(TermEngineBlock, DefaultTermsWithoutRowsEqualSinglePushes) {
  // Without rows the default 16 terms take the written-out sum: it must
  // equal FillTermRow and the partial-sum dot product of Push.
  for (const int k : {1, 2, 5}) {
    TermEngine::Options o;
    o.half_width = k;
    const std::size_t n = 3000;
    const Recording r = TrickyRecording(n, 0, 41 + static_cast<unsigned>(k));
    std::vector<double> coef(TermCount(o.terms));
    for (std::size_t t = 0; t < coef.size(); ++t) {
      coef[t] = std::pow(-1.7, static_cast<double>(t % 5)) * (1.0 + 1e-3 * static_cast<double>(t));
    }
    TermEngine single(o), block(o);
    single.SetCoefficients(coef.data());
    block.SetCoefficients(coef.data());
    std::vector<TermEngine::Output> one(static_cast<std::size_t>(single.max_outputs()));
    std::vector<double> expected;
    for (std::size_t i = 0; i < n; ++i) {
      const double b[3] = {r.bx[i], r.by[i], r.bz[i]};
      const int got = single.Push(r.time[i], b, r.f[i], nullptr, one.data());
      for (int j = 0; j < got; ++j) expected.push_back(one[static_cast<std::size_t>(j)].interference);
    }
    const int got = single.Flush(one.data());
    for (int j = 0; j < got; ++j) expected.push_back(one[static_cast<std::size_t>(j)].interference);
    ASSERT_EQ(expected.size(), n);
    std::vector<double> h(block.max_block_outputs());
    TermEngine::Columns out;
    out.interference = h.data();
    std::size_t seen = 0;
    auto check = [&](std::size_t m) {
      for (std::size_t i = 0; i < m; ++i, ++seen) {
        EXPECT_TRUE(SameBits(h[i], expected[seen])) << "k " << k << " sample " << seen;
      }
    };
    for (std::size_t i = 0; i < n; i += TermEngine::kMaxBlock) {
      const std::size_t len = std::min(TermEngine::kMaxBlock, n - i);
      check(block.PushBlock(len, &r.time[i], &r.bx[i], &r.by[i], &r.bz[i], &r.f[i],
                            nullptr, out));
    }
    check(block.FlushBlock(out));
    EXPECT_EQ(seen, n);
  }
}

TEST(TermEngineBlock, RefusesABlockLongerThanTheRing) {
  TermEngine engine(TermEngine::Options{});
  std::vector<double> x(TermEngine::kMaxBlock + 1, 1.0);
  EXPECT_THROW(engine.PushBlock(x.size(), x.data(), x.data(), x.data(),
                                x.data(), nullptr, nullptr, TermEngine::Columns{}),
               std::invalid_argument);
}

}  // namespace
}  // namespace fluxtrim::models
