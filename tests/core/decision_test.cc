// Decision stage: options, threshold table, false-alarm rate against the
// declared budget, detection delays against CUSUM theory, learning, freezing,
// transients and gaps. SegmentDecision is driven directly with synthetic
// block residuals; one tick is one block (dt = block_s) unless the block
// logic itself is under test.
//
// Every Monte Carlo here has a fixed seed (std::mt19937_64) and prints what it
// measured next to what theory or the budget says.
#include "holdfast/decision.h"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <map>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "holdfast/arl.h"

namespace holdfast {
namespace {

constexpr double kNominal_kg_s = 100.0;
constexpr double kBlock_s = 60.0;
constexpr double kBias_kg_s = 0.7;
// Long-run block sigma of the synthetic residual. With the default bank
// (0.5 % ... 20 % of 100 kg/s) the detectors' k are 0.1, 0.2, 0.4, 1 and 4:
// from patient to one-block detectors.
constexpr double kSigmaLongRun_kg_s = 2.5;

// Threshold tables take a fraction of a second to build: one per in-control
// ARL, shared by the tests (as segments share one in the monitor).
const CusumThresholdTable& TableFor(const DecisionOptions& o) {
  static std::map<double, std::unique_ptr<CusumThresholdTable>> tables;
  const double arl0 = ArlFromBudget(o.false_alarm_interval_s, o.block_s,
                                    static_cast<int>(o.target_fractions.size()));
  auto& slot = tables[arl0];
  if (!slot) {
    slot = std::make_unique<CusumThresholdTable>();
    std::string why;
    EXPECT_TRUE(slot->Build(arl0, &why)) << why;
  }
  return *slot;
}

// AR(1) block residual around zero with marginal standard deviation sigma:
// x_t = phi x_{t-1} + sqrt(1 - phi^2) sigma eps_t, started in its stationary
// distribution.
class Ar1 {
 public:
  Ar1(double phi, double sigma, uint64_t seed) : phi_(phi), innovation_(sigma * std::sqrt(1.0 - phi * phi)), rng_(seed) {
    x_ = sigma * normal_(rng_);
  }
  double Next() {
    x_ = phi_ * x_ + innovation_ * normal_(rng_);
    return x_;
  }

 private:
  double phi_, innovation_, x_ = 0.0;
  std::mt19937_64 rng_;
  std::normal_distribution<double> normal_;
};

// Marginal sigma of an AR(1) whose long-run sigma is kSigmaLongRun_kg_s.
double MarginalSigma(double phi) { return kSigmaLongRun_kg_s / std::sqrt((1.0 + phi) / (1.0 - phi)); }

// One block of residual r (kg/s) as one tick; `block` counts blocks.
double Seconds(int64_t block) { return static_cast<double>(block) * kBlock_s; }

void StepBlock(SegmentDecision& d, int64_t& block, double r_kg_s, double inventory_rate_kg_s = 0.0) {
  ++block;
  d.Step(Seconds(block), kBlock_s, true, r_kg_s * kBlock_s, inventory_rate_kg_s);
}

DecisionOptions QuietStart() {
  DecisionOptions o;
  o.warmup_s = 0.0;  // seeded: decide from the first block
  return o;
}

// ---------------------------------------------------------------------------
// 1. Options and set-up
// ---------------------------------------------------------------------------

TEST(DecisionOptions, DefaultsAreValid) {
  std::string why = "untouched";
  EXPECT_TRUE(DecisionOptions().IsValid(&why));
  EXPECT_EQ(why, "untouched");
  EXPECT_TRUE(DecisionOptions().IsValid(nullptr));
}

TEST(DecisionOptions, EachFailureSaysWhy) {
  struct Case {
    const char* name;
    void (*spoil)(DecisionOptions&);
    const char* reason;  // a fragment of the message
  };
  const Case cases[] = {
      {"no targets", [](DecisionOptions& o) { o.target_fractions.clear(); }, "target leak sizes"},
      {"too many targets", [](DecisionOptions& o) { o.target_fractions.assign(kMaxDetectors + 1, 0.01); },
       "target leak sizes"},
      {"zero target", [](DecisionOptions& o) { o.target_fractions = {0.01, 0.0}; }, "(0, 1)"},
      {"target of 1", [](DecisionOptions& o) { o.target_fractions = {1.0}; }, "(0, 1)"},
      {"NaN target", [](DecisionOptions& o) { o.target_fractions = {NAN}; }, "(0, 1)"},
      {"budget under an hour", [](DecisionOptions& o) { o.false_alarm_interval_s = 3599.0; }, "one hour"},
      {"NaN budget", [](DecisionOptions& o) { o.false_alarm_interval_s = NAN; }, "one hour"},
      {"zero block", [](DecisionOptions& o) { o.block_s = 0.0; }, "block length"},
      {"budget of few blocks",
       [](DecisionOptions& o) {
         o.false_alarm_interval_s = 3600.0;
         o.block_s = 360.0;
         o.learning_time_constant_s = 3600.0;
       },
       "many blocks"},
      {"learning faster than a block", [](DecisionOptions& o) { o.learning_time_constant_s = 30.0; },
       "learning time constant"},
      {"negative warm-up", [](DecisionOptions& o) { o.warmup_s = -1.0; }, "warm-up"},
      {"clip under one sigma", [](DecisionOptions& o) { o.clip_sigmas = 0.5; }, "clip_sigmas"},
      {"freeze ratio 0", [](DecisionOptions& o) { o.freeze_ratio = 0.0; }, "freeze_ratio"},
      {"freeze ratio 1", [](DecisionOptions& o) { o.freeze_ratio = 1.0; }, "freeze_ratio"},
  };
  for (const Case& c : cases) {
    DecisionOptions o;
    c.spoil(o);
    std::string why;
    EXPECT_FALSE(o.IsValid(&why)) << c.name;
    EXPECT_NE(why.find(c.reason), std::string::npos) << c.name << ": " << why;
    EXPECT_FALSE(o.IsValid(nullptr)) << c.name;
    // Init refuses the same options with the same reason.
    SegmentDecision d;
    std::string init_why;
    EXPECT_FALSE(d.Init(o, kNominal_kg_s, &TableFor(DecisionOptions()), &init_why)) << c.name;
    EXPECT_EQ(init_why, why) << c.name;
  }
}

TEST(SegmentDecision, InitNeedsNominalFlowAndTable) {
  const DecisionOptions o;
  const CusumThresholdTable& table = TableFor(o);
  SegmentDecision d;
  std::string why;
  EXPECT_FALSE(d.Init(o, 0.0, &table, &why));
  EXPECT_NE(why.find("nominal flow"), std::string::npos) << why;
  EXPECT_FALSE(d.Init(o, NAN, &table, &why));
  EXPECT_FALSE(d.Init(o, kNominal_kg_s, nullptr, &why));
  EXPECT_NE(why.find("table"), std::string::npos) << why;
  ASSERT_TRUE(d.Init(o, kNominal_kg_s, &table, &why)) << why;
  const DecisionResult& r = d.result();
  EXPECT_EQ(r.state, DecisionState::kLearning);
  EXPECT_EQ(r.detector_count, 5);
  EXPECT_DOUBLE_EQ(r.detectors[0].target_kg_s, 0.5);
  EXPECT_DOUBLE_EQ(r.detectors[4].target_kg_s, 20.0);
  // ArlFromBudget: 5 detectors x 90 days / 60 s blocks (arl.h).
  EXPECT_DOUBLE_EQ(r.arl0_blocks, 5.0 * 90.0 * 1440.0);
  EXPECT_STREQ(DecisionStateName(DecisionState::kSuspect), "suspect");
  EXPECT_STREQ(DecisionStateName(DecisionState::kUnavailable), "unavailable");
}

TEST(CusumThresholdTable, RejectsBadArlAndIsInfiniteUnbuilt) {
  CusumThresholdTable t;
  EXPECT_EQ(t.Lookup(0.5), INFINITY);  // never alarms before it is built
  std::string why;
  EXPECT_FALSE(t.Build(1.0, &why));
  EXPECT_NE(why.find("exceed one"), std::string::npos) << why;
  EXPECT_FALSE(t.Build(NAN, nullptr));
}

// The table's interpolated h, fed back into the Markov chain (Brook & Evans
// 1972, extrapolated; arl.h), against the budget's ARL, at k off the table's
// grid (33 points, log-spaced over 0.01 to 8). Measured: within 1 % where
// Siegmund's h is used (small k), up to +6 % in between (h interpolated
// linearly where it curves), and far longer (+42 % at k = 4.4 for the 90-day
// budget) where h bends down to zero; always on the long side there. Checked:
// 10 % where h >= 1, and never 5 % short where h < 1. Where even h = 0 alarms
// less often than the budget asks (one block beyond k: ARL 1/(1 - Phi(k)))
// the table must give about zero.
TEST(CusumThresholdTable, InterpolatedThresholdsMeetTheArl) {
  DecisionOptions short_budget;  // the false-alarm tests' budget
  short_budget.false_alarm_interval_s = 2000.0 * kBlock_s;
  for (const DecisionOptions& o : {short_budget, DecisionOptions()}) {
    const CusumThresholdTable& t = TableFor(o);
    const double arl0 = t.arl0();
    for (double k : {0.013, 0.047, 0.11, 0.29, 0.61, 1.37, 2.9, 4.4}) {
      const double h = t.Lookup(k);
      // The chain extrapolated from 400 and 200 states: within about 1 % up
      // to h = 200 (arl.h).
      const int states = static_cast<int>(std::clamp(std::ceil(20.0 * h), 200.0, 400.0));
      const double arl = CusumArlMarkovRichardson(h, k, 0.0, states);
      const double arl_at_zero = 2.0 / std::erfc(k / std::sqrt(2.0));
      std::printf("  arl0 %.0f k %.3f: table h %.4f, ARL %.0f (%+.1f %%)\n", arl0, k, h, arl,
                  100.0 * (arl / arl0 - 1.0));
      if (arl_at_zero >= arl0) {
        EXPECT_LT(h, 0.1) << "arl0=" << arl0 << " k=" << k;
      } else if (h >= 1.0) {
        EXPECT_LT(std::fabs(arl / arl0 - 1.0), 0.10) << "arl0=" << arl0 << " k=" << k << " h=" << h;
      } else {
        EXPECT_GT(arl, 0.95 * arl0) << "arl0=" << arl0 << " k=" << k << " h=" << h;
      }
    }
    EXPECT_EQ(t.Lookup(1e-6), t.Lookup(0.01));  // clamped to the grid
    EXPECT_EQ(t.Lookup(100.0), t.Lookup(8.0));
  }
}

// ---------------------------------------------------------------------------
// 2. False alarms against the budget (Monte Carlo, fixed seeds)
// ---------------------------------------------------------------------------
//
// A short budget, so that false alarms are frequent enough to count:
// 2000 blocks (33.3 h) per bank of five, i.e. an in-control ARL of 10 000
// blocks per detector (ArlFromBudget, the union bound). The learning is
// seeded with the true bias, sigma and phi and left running at its defaults,
// as deployed. After each alarm the alarming detector is restarted and the
// alarm declared false (ResetDetectors(i, true), so its excursion's blocks
// are learnt, as they would be after an operator's verdict): each detector
// is then the renewal process that ArlFromBudget assumes, and the bank's
// alarm count per simulated time gives the false-alarm interval to compare
// with the budget. (Dropping those blocks instead, as for a real leak, at
// this budget, some 65 times the deployed alarm rate, pulls the bias down by
// about 3 % of sigma and the bank interval to about 0.85 of the budget.)
//
// What limits the per-detector agreement is the learning, not the thresholds
// (within 2.5 % of the chain's ARL here, test above): the small-k detectors'
// ARL is exponentially sensitive to the learnt bias (d ln ARL / d bias about
// -35 per sigma at k = 0.1), and an exponentially weighted bias over two
// days of blocks wanders by about 1.3 % of sigma, which on average shortens
// their ARL. Measured over four seeds and the three residual models: 0.74
// to 1.05 of their share, checked against 0.6; where h > 1, also against
// 1.3. The bank, whose union bound has slack, measured 1.05 to 1.15 of the
// budget and is checked within 30 %. Before prewhitening (variance inflation) the bank
// measured 3.0 times the budget at phi = 0.5 and 0.21 times at phi = -0.3.
struct FalseAlarmCase {
  double phi;
  uint64_t seed;
};

class FalseAlarmBudget : public ::testing::TestWithParam<FalseAlarmCase> {};

TEST_P(FalseAlarmBudget, BankIntervalWithinThirtyPercentOfTheBudget) {
  const FalseAlarmCase c = GetParam();
  DecisionOptions o = QuietStart();
  o.false_alarm_interval_s = 2000.0 * kBlock_s;
  const double budget_blocks = o.false_alarm_interval_s / kBlock_s;
  const CusumThresholdTable& table = TableFor(o);
  const double arl0 = table.arl0();
  ASSERT_DOUBLE_EQ(arl0, 10000.0);
  SegmentDecision d;
  ASSERT_TRUE(d.Init(o, kNominal_kg_s, &table, nullptr));
  const double sigma = MarginalSigma(c.phi);
  d.Seed(kBias_kg_s, sigma, c.phi);

  Ar1 noise(c.phi, sigma, c.seed);
  constexpr int64_t kBlocks = 2500000;
  int64_t block = 0, bank_alarms = 0;
  int64_t alarms[kMaxDetectors] = {}, last[kMaxDetectors] = {}, run_sum[kMaxDetectors] = {};
  while (block < kBlocks) {
    StepBlock(d, block, kBias_kg_s + noise.Next());
    const DecisionResult& r = d.result();
    if (r.state != DecisionState::kLeak) continue;
    ++bank_alarms;
    for (int i = 0; i < r.detector_count; ++i) {
      if (r.detectors[i].statistic <= r.detectors[i].h) continue;
      ++alarms[i];
      run_sum[i] += block - last[i];
      last[i] = block;
      d.ResetDetectors(i, /*false_alarm=*/true);
    }
  }
  const DecisionResult& r = d.result();
  const double interval = static_cast<double>(kBlocks) / static_cast<double>(bank_alarms);
  std::printf("  phi %+.1f: bank false-alarm interval %.0f blocks (%.1f h) over %lld alarms; budget %.0f blocks "
              "(%.1f h): ratio %.3f\n",
              c.phi, interval, interval * kBlock_s / 3600.0, static_cast<long long>(bank_alarms), budget_blocks,
              o.false_alarm_interval_s / 3600.0, interval / budget_blocks);
  std::printf("  learnt bias %.4f (true %.4f) sigma %.4f (true %.4f) phi %.4f (true %.4f) kg/s\n", r.bias_kg_s,
              kBias_kg_s, r.sigma_kg_s, sigma, r.phi, c.phi);
  for (int i = 0; i < r.detector_count; ++i) {
    const DetectorStatus& s = r.detectors[i];
    const double arl = alarms[i] > 0 ? static_cast<double>(run_sum[i]) / static_cast<double>(alarms[i]) : INFINITY;
    std::printf("  detector %.1f kg/s: k %.3f h %.3f, %lld alarms, ARL %.0f blocks = %.3f of its share %.0f\n",
                s.target_kg_s, s.k, s.h, static_cast<long long>(alarms[i]), arl, arl / arl0, arl0);
    EXPECT_GT(arl, 0.6 * arl0) << "detector " << i;
    if (s.h > 1.0) {
      EXPECT_LT(arl, 1.3 * arl0) << "detector " << i;
    }
  }
  EXPECT_GT(interval, 0.7 * budget_blocks);
  EXPECT_LT(interval, 1.3 * budget_blocks);
}

INSTANTIATE_TEST_SUITE_P(WhiteAndAr1, FalseAlarmBudget,
                         ::testing::Values(FalseAlarmCase{0.0, 11}, FalseAlarmCase{0.5, 12},
                                           FalseAlarmCase{-0.3, 13}),
                         [](const ::testing::TestParamInfo<FalseAlarmCase>& p) {
                           return p.param.phi == 0.0  ? std::string("White")
                                  : p.param.phi > 0.0 ? std::string("Ar1Plus05")
                                                      : std::string("Ar1Minus03");
                         });

// Learning from scratch (no Seed, default warm-up and time constant) on
// leak-free AR(1) blocks: after 20 time constants the learnt values sit near
// the truth. The exponentially weighted estimates with weight w = block /
// time constant (1/2880 here) have standard deviations of about sigma_lr
// sqrt(w/2) = 1.3 % of the long-run sigma for the bias, 1-1.5 % for sigma
// and 0.02 for phi (textbook EWMA variance, from memory); the tolerances are
// about four of those. Clipping at 3 sigma lowers sigma by about 0.25 %.
class LearningConverges : public ::testing::TestWithParam<double> {};

TEST_P(LearningConverges, ToTheTrueBiasSigmaAndPhi) {
  const double phi = GetParam();
  const DecisionOptions o;
  SegmentDecision d;
  ASSERT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  const double sigma = MarginalSigma(phi);
  Ar1 noise(phi, sigma, 21);
  int64_t block = 0;
  const int64_t blocks = static_cast<int64_t>(20.0 * o.learning_time_constant_s / kBlock_s);
  int leak_blocks = 0;
  while (block < blocks) {
    StepBlock(d, block, kBias_kg_s + noise.Next());
    if (block == 10) {
      EXPECT_EQ(d.result().state, DecisionState::kLearning);
    }
    if (d.result().state == DecisionState::kLeak) ++leak_blocks;
  }
  const DecisionResult& r = d.result();
  std::printf("  phi %+.1f: learnt bias %.4f (true %.4f) sigma %.4f (true %.4f) phi %.4f kg/s\n", phi, r.bias_kg_s,
              kBias_kg_s, r.sigma_kg_s, sigma, r.phi);
  EXPECT_NEAR(r.bias_kg_s, kBias_kg_s, 0.05 * kSigmaLongRun_kg_s);
  EXPECT_NEAR(r.sigma_kg_s / sigma, 1.0, 0.05);
  EXPECT_NEAR(r.phi, phi, 0.07);
  // 40 days against a 90-day budget: a false alarm or two may come; printed only.
  std::printf("  blocks in the leak state: %d of %lld\n", leak_blocks, static_cast<long long>(blocks));
  EXPECT_NE(r.state, DecisionState::kLearning);
}

INSTANTIATE_TEST_SUITE_P(WhiteAndAr1, LearningConverges, ::testing::Values(0.0, 0.5, -0.3));

// From a cold start the detectors start one by one, each once the bias's
// standard error sigma_lr / sqrt(n) is a quarter of its k
// (kStartBiasErrorFraction): n = 1 / (k/4)^2 = 1600, 400 and 100 learnt blocks
// for k = 0.1, 0.2 and 0.4, and at the end of the hour's warm-up for k = 1
// (16). Until then a detector's statistic stays at zero. Seen as the first
// block with a positive statistic, which follows the start within a few
// blocks in control; learnt blocks trail the block count by the learning's
// lag (a few hundred blocks at most here), and the learnt sigma moves the
// start by a few percent. Fixed seed.
TEST(ColdStart, DetectorsStartAsTheBiasBecomesKnown) {
  const DecisionOptions o;
  SegmentDecision d;
  ASSERT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  Ar1 noise(0.0, kSigmaLongRun_kg_s, 31);
  int64_t block = 0, first_positive[kMaxDetectors];
  std::fill(first_positive, first_positive + kMaxDetectors, -1);
  while (block < 4000) {
    StepBlock(d, block, kBias_kg_s + noise.Next());
    for (int i = 0; i < d.result().detector_count; ++i)
      if (first_positive[i] < 0 && d.result().detectors[i].statistic > 0.0) first_positive[i] = block;
  }
  const double expected[] = {1600.0, 400.0, 100.0, 61.0};
  for (int i = 0; i < 4; ++i) {
    std::printf("  detector %.1f kg/s: first positive statistic at block %lld (start expected near %.0f)\n",
                d.result().detectors[i].target_kg_s, static_cast<long long>(first_positive[i]), expected[i]);
    EXPECT_GE(static_cast<double>(first_positive[i]), 0.85 * expected[i]) << "detector " << i;
    EXPECT_LE(static_cast<double>(first_positive[i]), 1.15 * expected[i] + 300.0) << "detector " << i;
  }
}

// ---------------------------------------------------------------------------
// 3. Detection of step leaks (Monte Carlo, fixed seeds)
// ---------------------------------------------------------------------------
//
// Default options (90-day budget, 60 s blocks, two-day learning). Each run:
// Init, Seed with the true values, 2000 leak-free blocks so that the learning
// weight has come down to its long-run 1/2880 (a fresh Seed counts as 1000
// blocks, so its weight starts at 1/1000), ResetDetectors() so the run starts
// from S = 0 (the zero-state ARL that the Markov chain gives), then a step
// leak of exactly the bank's target size i from the next block on.
// Measured per run:
//   delay: blocks from the leak's first block to detector i's statistic
//          exceeding h (first block counts 1: the ARL's convention);
//   change point: detector i's change_point_s at that moment, in blocks
//          after the last leak-free block;
//   leak rate: result().leak_rate_kg_s (mean of r - bias since the leading
//          detector's change point) once as many blocks again have passed
//          (at least 10): "settled".
// Theory: CusumArlMarkov at the design shift 2k (k = d / (2 sigma_lr), h from
// the table), and Lorden's first-order asymptote 2 ln(ARL0) / delta^2
// (CusumDelayBound). Lorden's is not a bound at finite ARL0: the CUSUM,
// optimal for his criterion (Moustakides 1986), reaches it from below, by
// Siegmund's second-order term 2 (1 + ln(2/delta^2)) / delta^2 (arl.h). So
// the check is delay >= asymptote - that term (three standard errors of
// slack) and delay <= asymptote + 1 block, not delay >= asymptote, which
// fails for the three smaller leaks (measured 431 < 669, 123 < 167, 34 < 42
// blocks).
// The leak-rate estimate runs some 7 to 13 % high for the smaller leaks:
// the blocks just after a statistic's last zero are the ones that lifted it
// (a selected sample), and it is checked within the 20 % asked of it.
struct DelayStats {
  double delay = 0.0, delay_se = 0.0, rate_over_true = 0.0, rate_rms = 0.0, change_point = 0.0,
         abs_change_point = 0.0;
  double k = 0.0, h = 0.0;
};

DelayStats SimulateStepLeaks(int size, double phi, int runs, uint64_t seed) {
  const DecisionOptions o = QuietStart();
  const CusumThresholdTable& table = TableFor(o);
  const double leak = o.target_fractions[size] * kNominal_kg_s;
  const double sigma = MarginalSigma(phi);
  Ar1 noise(phi, sigma, seed);
  DelayStats s;
  double sum = 0.0, sum2 = 0.0;
  for (int run = 0; run < runs; ++run) {
    SegmentDecision d;
    EXPECT_TRUE(d.Init(o, kNominal_kg_s, &table, nullptr));
    d.Seed(kBias_kg_s, sigma, phi);
    int64_t block = 0;
    for (int j = 0; j < 2000; ++j) StepBlock(d, block, kBias_kg_s + noise.Next());
    d.ResetDetectors();
    const int64_t onset = block;
    int64_t delay = 0;
    do {
      StepBlock(d, block, kBias_kg_s + leak + noise.Next());
      ++delay;
    } while (d.result().detectors[size].statistic <= d.result().detectors[size].h && delay < 100000);
    const double cp = (d.result().detectors[size].change_point_s / kBlock_s) - static_cast<double>(onset);
    for (int64_t j = 0; j < std::max<int64_t>(delay, 10); ++j) StepBlock(d, block, kBias_kg_s + leak + noise.Next());
    const double ratio = d.result().leak_rate_kg_s / leak;
    sum += static_cast<double>(delay);
    sum2 += static_cast<double>(delay) * static_cast<double>(delay);
    s.rate_over_true += ratio;
    s.rate_rms += (ratio - 1.0) * (ratio - 1.0);
    s.change_point += cp;
    s.abs_change_point += std::fabs(cp);
  }
  s.delay = sum / runs;
  s.delay_se = std::sqrt(std::max(0.0, sum2 / runs - s.delay * s.delay) / (runs - 1));
  s.rate_over_true /= runs;
  s.rate_rms = std::sqrt(s.rate_rms / runs);
  s.change_point /= runs;
  s.abs_change_point /= runs;
  s.k = 0.5 * leak / kSigmaLongRun_kg_s;
  s.h = table.Lookup(s.k);
  return s;
}

class StepLeak : public ::testing::TestWithParam<int> {};

TEST_P(StepLeak, DetectedWithTheTheoreticalDelay) {
  const int size = GetParam();
  const int runs = size <= 1 ? 400 : 200;
  const DelayStats s = SimulateStepLeaks(size, 0.0, runs, 100 + size);
  const double arl0 = TableFor(QuietStart()).arl0();
  const double delta = 2.0 * s.k;
  const double markov = CusumArlMarkov(s.h, s.k, delta, 400);
  const double lorden = CusumDelayBound(arl0, delta);
  const double second_order = 2.0 * (1.0 + std::log(2.0 / (delta * delta))) / (delta * delta);
  std::printf("  leak %.1f kg/s (k %.3f, h %.3f, %d runs): delay %.2f +/- %.2f blocks, Markov %.2f (ratio %.3f); "
              "Lorden asymptote %.2f less second-order term %.2f = %.2f\n",
              QuietStart().target_fractions[size] * kNominal_kg_s, s.k, s.h, runs, s.delay, s.delay_se, markov,
              s.delay / markov, lorden, second_order, lorden - second_order);
  std::printf("  leak-rate estimate settled: %.3f of true (rms %.3f per run); change point %.2f blocks after onset "
              "(mean |.| %.2f)\n",
              s.rate_over_true, s.rate_rms, s.change_point, s.abs_change_point);
  EXPECT_LT(std::fabs(s.delay / markov - 1.0), 0.15);
  EXPECT_GE(s.delay + 3.0 * s.delay_se, lorden - second_order);
  EXPECT_LE(s.delay, lorden + 1.0);
  EXPECT_LT(std::fabs(s.rate_over_true - 1.0), 0.20);
  // The change point (last zero of the statistic) trails the onset a little:
  // the statistic can still touch zero in the leak's first blocks.
  EXPECT_GE(s.change_point, -0.5);
  EXPECT_LE(s.abs_change_point, 0.25 * s.delay + 0.5);
}

INSTANTIATE_TEST_SUITE_P(EachBankSize, StepLeak, ::testing::Values(0, 1, 2, 3, 4));

// The same on AR(1) blocks (phi = 0.5) for the 2 kg/s detector: after
// prewhitening a step d shifts z by d (1 - phi)/(sigma sqrt(1 - phi^2)) =
// d / sigma_lr (its first block by d / (sigma sqrt(1 - phi^2)), a little
// more), so the delay is again the chain's at shift 2k.
TEST(StepLeakAr1, DelayMatchesTheDesignShift) {
  const DelayStats s = SimulateStepLeaks(2, 0.5, 200, 150);
  const double markov = CusumArlMarkov(s.h, s.k, 2.0 * s.k, 400);
  std::printf("  phi 0.5, leak 2 kg/s: delay %.2f +/- %.2f blocks, Markov %.2f (ratio %.3f); rate %.3f of true\n",
              s.delay, s.delay_se, markov, s.delay / markov, s.rate_over_true);
  EXPECT_LT(std::fabs(s.delay / markov - 1.0), 0.15);
  EXPECT_LT(std::fabs(s.rate_over_true - 1.0), 0.20);
}

// ---------------------------------------------------------------------------
// 4. Learning freezes while a leak builds
// ---------------------------------------------------------------------------
//
// A slow leak: a ramp from zero reaching the smallest target (0.5 kg/s) after
// one day and growing on. While any detector is above freeze_ratio * h
// nothing is learnt: the bias the detectors use (result().bias_kg_s, the
// value after the previous block's learning) must not move from one block to
// the next after any block in the suspect or leak state. And since a block is
// learnt only once every detector has been back at zero after it, the ramp is
// learnt only while it is too small to keep the detectors off zero (there it
// cannot be told from a drifting bias). Measured: by detection the bias has
// moved by -1 to +10 % of the leak (mean 5 %; learning noise alone is about
// 0.02 kg/s, 3 to 9 % of it); learning every block up to the freeze, as the
// stage did at first, it had taken 7 to 17 % (mean 12 %), and with
// freeze_ratio 0.99 some 25 %. Checked: under 15 % per seed, 10 % on average.
// Fixed seeds.
struct RampOutcome {
  int64_t detected_block = -1;
  double taken = 0.0;  // (bias at detection - bias at onset) / leak at detection
  double leak_at_detection = 0.0;
  int64_t frozen_blocks = 0, moved_while_frozen = 0;
};

RampOutcome RunRamp(uint64_t seed) {
  const DecisionOptions o = QuietStart();
  SegmentDecision d;
  EXPECT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
  Ar1 noise(0.0, kSigmaLongRun_kg_s, seed);
  int64_t block = 0;
  for (int j = 0; j < 3000; ++j) StepBlock(d, block, kBias_kg_s + noise.Next());
  d.ResetDetectors();
  const int64_t onset = block;
  const double slope_per_block = 0.5 / 1440.0;
  RampOutcome out;
  double previous_bias = d.result().bias_kg_s;
  const double bias_at_onset = previous_bias;
  bool previous_frozen = false;
  while (block < onset + 20000) {
    const double leak = slope_per_block * static_cast<double>(block + 1 - onset);
    StepBlock(d, block, kBias_kg_s + leak + noise.Next());
    const DecisionResult& r = d.result();
    if (previous_frozen) {
      ++out.frozen_blocks;
      if (r.bias_kg_s != previous_bias) ++out.moved_while_frozen;
    }
    previous_bias = r.bias_kg_s;
    previous_frozen = r.state == DecisionState::kSuspect || r.state == DecisionState::kLeak;
    if (r.state == DecisionState::kLeak) {
      out.detected_block = block - onset;
      out.leak_at_detection = leak;
      out.taken = (r.bias_kg_s - bias_at_onset) / leak;
      break;
    }
  }
  return out;
}

TEST(LearningFreeze, SlowLeakIsNotAbsorbedIntoTheBias) {
  double sum_taken = 0.0;
  constexpr int kSeeds = 6;
  for (uint64_t seed = 300; seed < 300 + kSeeds; ++seed) {
    const RampOutcome f = RunRamp(seed);
    ASSERT_GE(f.detected_block, 0) << "seed " << seed;
    std::printf("  seed %llu: detected after %lld blocks at %.3f kg/s; the bias moved by %+.1f %% of it "
                "(%lld frozen blocks, moved in %lld)\n",
                static_cast<unsigned long long>(seed), static_cast<long long>(f.detected_block),
                f.leak_at_detection, 100.0 * f.taken, static_cast<long long>(f.frozen_blocks),
                static_cast<long long>(f.moved_while_frozen));
    EXPECT_GT(f.frozen_blocks, 10) << "seed " << seed;
    EXPECT_EQ(f.moved_while_frozen, 0) << "seed " << seed;
    EXPECT_LT(f.taken, 0.15) << "seed " << seed;
    sum_taken += f.taken;
  }
  EXPECT_LT(sum_taken / kSeeds, 0.10);
}

// The lag itself, on noise-free residuals (deterministic). A bump of 2 kg/s
// for 20 blocks lifts the 2 kg/s detector above freeze_ratio * h and the
// 0.5 kg/s one to 14 (of h = 46), which then takes some 140 blocks to come
// back to zero: the bump's blocks are learnt only then, all together. A bump
// that alarms is dropped from the learning if the alarm clears by itself or
// is reset as real, and learnt if it is reset as false.
struct BumpRun {
  std::vector<double> bias;  // result().bias_kg_s after each block from the bump on
  std::vector<DecisionState> state;
  int64_t all_zero_block = -1;  // first block (from the bump) with every statistic at zero
};

enum class AfterAlarm { kNothing, kResetReal, kResetFalse };

// The learning rule of decision.cc (Learn) for the mean, replayed on the
// blocks expected to be learnt: weight max(1/n, block / time constant), n
// counting learnt blocks (a Seed counts as 1000). No clipping: the bumps
// here stay below 3 sigma.
double ReplayMean(double mean, int64_t n, const std::vector<double>& learnt_r) {
  const DecisionOptions o;
  for (double r : learnt_r) {
    ++n;
    mean += std::max(1.0 / static_cast<double>(n), o.block_s / o.learning_time_constant_s) * (r - mean);
  }
  return mean;
}

BumpRun RunBump(double bump_kg_s, AfterAlarm after) {
  const DecisionOptions o = QuietStart();
  SegmentDecision d;
  EXPECT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
  int64_t block = 0;
  for (int j = 0; j < 10; ++j) StepBlock(d, block, kBias_kg_s);
  BumpRun out;
  bool reset_done = false;
  for (int j = 0; j < 400; ++j) {
    StepBlock(d, block, kBias_kg_s + (j < 20 ? bump_kg_s : 0.0));
    if (d.result().state == DecisionState::kLeak && after != AfterAlarm::kNothing && !reset_done) {
      // Handled once the bump is over.
      if (j >= 19) {
        d.ResetDetectors(-1, after == AfterAlarm::kResetFalse);
        reset_done = true;
      }
    }
    out.bias.push_back(d.result().bias_kg_s);
    out.state.push_back(d.result().state);
    bool all_zero = true;
    for (int i = 0; i < d.result().detector_count; ++i) all_zero = all_zero && d.result().detectors[i].statistic == 0.0;
    if (all_zero && out.all_zero_block < 0 && j >= 20) out.all_zero_block = j;
  }
  return out;
}

TEST(LearningLag, AnExcursionIsLearntWhenItEndsAndAnAlarmsOnlyIfFalse) {
  const BumpRun small = RunBump(2.0, AfterAlarm::kNothing);
  ASSERT_GT(small.all_zero_block, 100);
  EXPECT_NE(std::find(small.state.begin(), small.state.end(), DecisionState::kSuspect), small.state.end());
  EXPECT_EQ(std::find(small.state.begin(), small.state.end(), DecisionState::kLeak), small.state.end());
  // The bias reported at block j is the value after block j - 1's learning.
  const double before = small.bias.front();
  for (int64_t j = 0; j <= small.all_zero_block; ++j) EXPECT_EQ(small.bias[j], before) << "block " << j;
  const double after = small.bias[small.all_zero_block + 1];
  std::printf("  2 kg/s bump: bias %.5f -> %.5f kg/s once every detector is back at zero (block %lld)\n", before,
              after, static_cast<long long>(small.all_zero_block));
  // Learnt then, in order: the 20 bump blocks and the level blocks up to and
  // including the one that brought the last detector to zero; before them
  // the Seed (1000) and the 10 level blocks.
  std::vector<double> learnt(20, kBias_kg_s + 2.0);
  learnt.resize(static_cast<size_t>(small.all_zero_block + 1), kBias_kg_s);
  EXPECT_NEAR(after, ReplayMean(kBias_kg_s, 1010, learnt), 1e-12);

  // A 5 kg/s bump alarms (the 5 kg/s detector, k = 1, h = 5.9).
  const BumpRun cleared = RunBump(5.0, AfterAlarm::kNothing);
  const BumpRun real = RunBump(5.0, AfterAlarm::kResetReal);
  const BumpRun false_alarm = RunBump(5.0, AfterAlarm::kResetFalse);
  for (const BumpRun* r : {&cleared, &real, &false_alarm})
    EXPECT_NE(std::find(r->state.begin(), r->state.end(), DecisionState::kLeak), r->state.end());
  std::printf("  5 kg/s bump that alarms: bias at the end %.5f (cleared by itself), %.5f (reset as real), %.5f "
              "after the reset as false, from %.5f kg/s\n",
              cleared.bias.back(), real.bias.back(), false_alarm.bias[21], cleared.bias.front());
  EXPECT_NEAR(cleared.bias.back(), cleared.bias.front(), 1e-12);
  EXPECT_NEAR(real.bias.back(), real.bias.front(), 1e-12);
  // Reset as false after the bump's last block (19): the next block (20)
  // finds every detector at zero and learns the 20 bump blocks and itself.
  std::vector<double> learnt5(20, kBias_kg_s + 5.0);
  learnt5.push_back(kBias_kg_s);
  EXPECT_EQ(false_alarm.bias[20], false_alarm.bias.front());
  EXPECT_NEAR(false_alarm.bias[21], ReplayMean(kBias_kg_s, 1010, learnt5), 1e-12);
}

// ---------------------------------------------------------------------------
// 5. Transients
// ---------------------------------------------------------------------------
//
// After a day of normal operation (inventory rate noise 1 kg/s), a pump start
// shows as five blocks of 40 kg/s inventory rate, during which the residual
// is off by 4 sigma (the inventory term's error). With the transient seen,
// sensitivity is reduced (statistics held) from the first burst
// block until kTransientHold_s after the last, nothing is learnt meanwhile,
// and no leak alarm follows. The same residual without the inventory burst
// (so no transient is recognised) raises a leak alarm: the reduction is what
// saves it. Fixed seed.
struct TransientRun {
  bool any_leak = false;
  std::vector<double> reduced_times_s;  // block ends with reduced sensitivity
  // result().bias_kg_s is the bias after the previous block's learning: at
  // the first burst block it includes the last normal block, at the first
  // block after the hold everything up to the last reduced block.
  double bias_at_burst = 0.0, bias_after_hold = 0.0;
};

TransientRun RunTransient(bool burst_in_inventory) {
  const DecisionOptions o;  // default warm-up: learns the inventory-rate spread from scratch
  SegmentDecision d;
  EXPECT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  std::mt19937_64 rng(500);
  std::normal_distribution<double> normal;
  int64_t block = 0;
  for (int j = 0; j < 1440; ++j) StepBlock(d, block, kBias_kg_s + kSigmaLongRun_kg_s * normal(rng), normal(rng));
  EXPECT_EQ(d.result().state, DecisionState::kWatching);
  TransientRun out;
  const int64_t first = block + 1, last = block + 5;
  const int64_t after_hold = last + static_cast<int64_t>(kTransientHold_s / kBlock_s);
  while (block < last + 120) {
    const bool in_burst = block + 1 >= first && block + 1 <= last;
    const double r = kBias_kg_s + kSigmaLongRun_kg_s * (normal(rng) + (in_burst ? 4.0 : 0.0));
    const double inv = normal(rng) + (in_burst && burst_in_inventory ? 40.0 : 0.0);
    StepBlock(d, block, r, inv);
    if (d.result().reduced_sensitivity) out.reduced_times_s.push_back(Seconds(block));
    if (d.result().state == DecisionState::kLeak) out.any_leak = true;
    if (block == first) out.bias_at_burst = d.result().bias_kg_s;
    if (block == after_hold) out.bias_after_hold = d.result().bias_kg_s;
  }
  return out;
}

TEST(Transient, ReducesSensitivityForTheHoldAndRaisesNoLeak) {
  const TransientRun with = RunTransient(true);
  const TransientRun without = RunTransient(false);
  const double first_s = Seconds(1441), last_s = Seconds(1445);
  // Reduced at the block ends t with first_s <= t < last_s + kTransientHold_s.
  ASSERT_FALSE(with.reduced_times_s.empty());
  EXPECT_DOUBLE_EQ(with.reduced_times_s.front(), first_s);
  EXPECT_DOUBLE_EQ(with.reduced_times_s.back(), last_s + kTransientHold_s - kBlock_s);
  EXPECT_EQ(with.reduced_times_s.size(), static_cast<size_t>(4.0 + kTransientHold_s / kBlock_s));
  EXPECT_FALSE(with.any_leak);
  EXPECT_EQ(with.bias_after_hold, with.bias_at_burst);  // nothing learnt while reduced
  // Without the burst in the inventory rate nothing is reduced, and the same
  // residual error is a leak.
  EXPECT_TRUE(without.reduced_times_s.empty());
  EXPECT_TRUE(without.any_leak);
}

// A seeded decision (tuning file, restored state) must not call every block a
// transient: seeded without the inventory-rate statistics it learns them from
// its own first 30 blocks; seeded with them it tests at once. (Regression: a
// seeded block count with a zero inventory-rate variance made every block a
// transient, and the reduced sensitivity then held off the learning that
// would have ended it; `holdfast evaluate` found a 1 % leak taking 70 min
// instead of 12.)
TEST(Transient, SeededDecisionTestsTransientsAgainstRealSpreads) {
  const DecisionOptions o;
  for (bool with_inventory : {false, true}) {
    SegmentDecision d;
    ASSERT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
    if (with_inventory) d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0, 0.0, 1.0);
    else d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
    std::mt19937_64 rng(501);
    std::normal_distribution<double> normal;
    int64_t block = 0;
    int reduced = 0;
    for (int j = 0; j < 600; ++j) {
      StepBlock(d, block, kBias_kg_s + kSigmaLongRun_kg_s * normal(rng), normal(rng));
      reduced += d.result().reduced_sensitivity;
    }
    EXPECT_EQ(reduced, 0) << (with_inventory ? "seeded with" : "seeded without") << " inventory statistics";
    EXPECT_NEAR(d.inventory_rate_sigma_kg_s(), 1.0, 0.15);
    // A real transient is still seen.
    StepBlock(d, block, kBias_kg_s, 40.0);
    EXPECT_TRUE(d.result().reduced_sensitivity);
  }
}

// Model error that comes and goes: over an hour the residual's spread grows
// from the learnt sigma to three times it, and stays there for two more
// hours, with no lasting shift (the hours after a restart while temperature
// fronts move). The local volatility widens the detectors' sigma by what the
// residual shows; without it the same wobble is a leak alarm on every seed
// (the bank's thresholds are set for N(0, 1); the four-sigma one-block
// detector alone expects 120 x 2 P(Z > 4.4 / 3) ~ 17 alarms at the full
// spread). With it, the alarms left (5 of 20 seeds at the defaults) come
// while the spread still grows faster than the 30-minute average follows
// it, at the same block as without: an abrupt wobble is the transient
// detector's, not this one's.
TEST(Volatility, WideningByTheResidualsOwnSpreadKeepsModelErrorFromAlarming) {
  auto run = [](double tau_s, uint64_t seed, double* max_scale) {
    DecisionOptions o = QuietStart();
    o.volatility_time_constant_s = tau_s;
    SegmentDecision d;
    EXPECT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
    d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
    std::mt19937_64 rng(seed);
    std::normal_distribution<double> normal;
    int64_t block = 0;
    for (int j = 0; j < 600; ++j) StepBlock(d, block, kBias_kg_s + kSigmaLongRun_kg_s * normal(rng));
    EXPECT_EQ(d.result().volatility_scale, 1.0) << "steady operation costs nothing";
    bool alarmed = false;
    *max_scale = 1.0;
    for (int j = 0; j < 180; ++j) {
      const double spread = std::min(3.0, 1.0 + 2.0 * j / 60.0);
      StepBlock(d, block, kBias_kg_s + spread * kSigmaLongRun_kg_s * normal(rng));
      alarmed = alarmed || d.result().state == DecisionState::kLeak;
      *max_scale = std::max(*max_scale, d.result().volatility_scale);
    }
    return alarmed;
  };
  int with = 0, without = 0;
  double scale = 0.0, unused = 0.0;
  for (uint64_t seed = 900; seed < 920; ++seed) {
    with += run(DecisionOptions{}.volatility_time_constant_s, seed, &scale);
    without += run(0.0, seed, &unused);
    EXPECT_GT(scale, 1.5) << "seed " << seed;
  }
  std::printf("  wobble rising to 3 sigma, 3 h: alarmed on %d of 20 seeds with the volatility scale, %d without\n", with,
              without);
  EXPECT_GE(without, 18);
  EXPECT_LE(with, 6);
}

// A lasting shift of the mean is not volatility: a 5 % leak (k = 1) is found
// as fast with the scale as without it, since its step is one clipped
// innovation and then a shift the local mean absorbs.
TEST(Volatility, ALeakIsNotVolatility) {
  auto delay = [](double tau_s) {
    DecisionOptions o = QuietStart();
    o.volatility_time_constant_s = tau_s;
    double sum = 0.0;
    for (uint64_t seed = 950; seed < 990; ++seed) {
      SegmentDecision d;
      EXPECT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
      d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
      std::mt19937_64 rng(seed);
      std::normal_distribution<double> normal;
      int64_t block = 0;
      for (int j = 0; j < 600; ++j) StepBlock(d, block, kBias_kg_s + kSigmaLongRun_kg_s * normal(rng));
      int n = 0;
      do {
        StepBlock(d, block, kBias_kg_s + 0.05 * kNominal_kg_s + kSigmaLongRun_kg_s * normal(rng));
        ++n;
      } while (d.result().state != DecisionState::kLeak && n < 1000);
      sum += n;
    }
    return sum / 40.0;
  };
  const double with = delay(DecisionOptions{}.volatility_time_constant_s), without = delay(0.0);
  std::printf("  5 %% leak: mean delay %.2f blocks with the volatility scale, %.2f without\n", with, without);
  EXPECT_LE(with, without + 0.5);
}

// ---------------------------------------------------------------------------
// 6. Gaps and the block logic
// ---------------------------------------------------------------------------

// Blocks of sixty 1 s ticks give the same decision as one 60 s tick per
// block: the block mean is the sum of the ticks' imbalance over the block.
TEST(BlockLogic, OneSecondTicksMatchOneTickPerBlock) {
  const DecisionOptions o = QuietStart();
  SegmentDecision fine, coarse;
  ASSERT_TRUE(fine.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  ASSERT_TRUE(coarse.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  fine.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
  coarse.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
  std::mt19937_64 rng(600);
  std::normal_distribution<double> normal;
  for (int b = 0; b < 300; ++b) {
    const double leak = b >= 150 ? 2.0 : 0.0;
    double block_kg = 0.0;
    for (int s = 1; s <= 60; ++s) {
      // Uneven ticks: the imbalance per tick varies, the block total counts.
      const double tick_kg = (kBias_kg_s + leak) + 10.0 * normal(rng);
      block_kg += tick_kg;
      fine.Step(b * 60.0 + s, 1.0, true, tick_kg, 0.0);
    }
    coarse.Step((b + 1) * 60.0, 60.0, true, block_kg, 0.0);
    ASSERT_EQ(fine.result().state, coarse.result().state) << "block " << b;
    ASSERT_NEAR(fine.result().bias_kg_s, coarse.result().bias_kg_s, 1e-9);
    for (int i = 0; i < 5; ++i) {
      ASSERT_NEAR(fine.result().detectors[i].statistic, coarse.result().detectors[i].statistic, 1e-9);
      ASSERT_EQ(fine.result().detectors[i].change_point_s, coarse.result().detectors[i].change_point_s);
    }
  }
  EXPECT_NE(coarse.result().state, DecisionState::kWatching);  // the 2 kg/s leak shows
}

// While the balance is unavailable nothing moves: statistics, change points,
// learnt values all held, state kUnavailable. A partial block across the gap
// is dropped; blocks restart at the first valid tick after it.
TEST(Unavailable, HoldsTheStatisticsAndDropsThePartialBlock) {
  const DecisionOptions o = QuietStart();
  SegmentDecision d;
  ASSERT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
  std::mt19937_64 rng(700);
  std::normal_distribution<double> normal;
  double t = 0.0;
  auto tick = [&](bool valid, double leak) {
    t += 1.0;
    d.Step(t, 1.0, valid, (kBias_kg_s + leak + 10.0 * normal(rng)), 0.0);
  };
  for (int s = 0; s < 60 * 100; ++s) tick(true, 2.0);  // 100 blocks with a 2 kg/s leak: statistics above zero
  for (int s = 0; s < 30; ++s) tick(true, 2.0);        // half a block
  const DecisionResult before = d.result();
  ASSERT_GT(before.detectors[0].statistic, 0.0);
  for (int s = 0; s < 600; ++s) {
    tick(false, 2.0);
    const DecisionResult& r = d.result();
    ASSERT_EQ(r.state, DecisionState::kUnavailable);
    ASSERT_EQ(r.bias_kg_s, before.bias_kg_s);
    ASSERT_EQ(r.sigma_kg_s, before.sigma_kg_s);
    for (int i = 0; i < r.detector_count; ++i) {
      ASSERT_EQ(r.detectors[i].statistic, before.detectors[i].statistic);
      ASSERT_EQ(r.detectors[i].change_point_s, before.detectors[i].change_point_s);
      ASSERT_EQ(r.detectors[i].blocks, before.detectors[i].blocks);
    }
  }
  const double gap_end_s = t;
  // The half block before the gap is gone: the next block ends 60 valid
  // ticks after the gap, not 30. The 20 kg/s detector (k about 4) sits at
  // zero, so its change point marks every block end.
  for (int s = 0; s < 59; ++s) {
    tick(true, 2.0);
    ASSERT_EQ(d.result().detectors[4].change_point_s, before.detectors[4].change_point_s) << "tick " << s;
  }
  tick(true, 2.0);
  EXPECT_EQ(d.result().detectors[4].change_point_s, gap_end_s + 60.0);
  EXPECT_NE(d.result().state, DecisionState::kUnavailable);
}

// ResetDetectors restarts one detector or all, recomputes the state, and
// leaves the learning alone.
TEST(SegmentDecision, ResetDetectorsRestartsTheCusums) {
  const DecisionOptions o = QuietStart();
  SegmentDecision d;
  ASSERT_TRUE(d.Init(o, kNominal_kg_s, &TableFor(o), nullptr));
  d.Seed(kBias_kg_s, kSigmaLongRun_kg_s, 0.0);
  int64_t block = 0;
  for (int j = 0; j < 20; ++j) StepBlock(d, block, kBias_kg_s + 5.0);  // a 5 kg/s leak, no noise
  ASSERT_EQ(d.result().state, DecisionState::kLeak);
  const DecisionResult before = d.result();
  d.ResetDetectors(1);
  EXPECT_EQ(d.result().detectors[1].statistic, 0.0);
  EXPECT_EQ(d.result().detectors[1].blocks, 0);
  EXPECT_EQ(d.result().detectors[1].change_point_s, Seconds(block));
  EXPECT_EQ(d.result().detectors[0].statistic, before.detectors[0].statistic);
  EXPECT_EQ(d.result().state, DecisionState::kLeak);  // the others still above h
  d.ResetDetectors();
  for (int i = 0; i < 5; ++i) EXPECT_EQ(d.result().detectors[i].statistic, 0.0) << i;
  EXPECT_EQ(d.result().state, DecisionState::kWatching);
  EXPECT_EQ(d.result().leak_rate_kg_s, 0.0);
  EXPECT_EQ(d.result().bias_kg_s, before.bias_kg_s);
  EXPECT_EQ(d.result().sigma_kg_s, before.sigma_kg_s);
  StepBlock(d, block, kBias_kg_s + 5.0);  // and they run again from zero
  EXPECT_GT(d.result().detectors[0].statistic, 0.0);
  EXPECT_EQ(d.result().detectors[0].blocks, 1);
  EXPECT_NE(d.result().ToString().find("bias="), std::string::npos);
}

}  // namespace
}  // namespace holdfast
