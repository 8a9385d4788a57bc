// Sequential-test theory: CUSUM run lengths, thresholds, budget, SPRT.
#include "holdfast/arl.h"

#include <cmath>
#include <cstdint>
#include <random>
#include <string>

#include <gtest/gtest.h>

namespace holdfast {
namespace {

double Rel(double a, double b) { return std::fabs(a / b - 1.0); }

// Two-sided ARL of the k = 0.5 CUSUM from the one-sided Markov chain, the way
// the published tables are built (see arl.h).
double TwoSidedMarkov(double h, double k, double mu) {
  return CusumArlTwoSided(CusumArlMarkov(h, k, mu), CusumArlMarkov(h, k, -mu));
}

// ---------------------------------------------------------------------------
// Published tables. ARL of the CUSUM with k = 0.5, h = 4 and h = 5:
// Montgomery, Introduction to Statistical Quality Control, the CUSUM chapter
// (Table 9.x for k = 0.5), and NIST/SEMATECH e-Handbook of Statistical
// Methods, sec. 6.3.2.3. Values from memory:
//   shift (sigma)   0      0.5    1.0    2.0
//   h = 4           168    26.6   8.38   3.34
//   h = 5           465    38.0   10.4   4.01
// These are TWO-sided ARLs (the in-control values are half the one-sided
// ones). Verified against the Markov chain below and against the Page
// integral equation in tests/ref/arl_check.py before being asserted.
// ---------------------------------------------------------------------------
struct TableRow {
  double h, mu, arl;
};
constexpr TableRow kTable[] = {
    {4.0, 0.0, 168.0}, {4.0, 0.5, 26.6}, {4.0, 1.0, 8.38}, {4.0, 2.0, 3.34},
    {5.0, 0.0, 465.0}, {5.0, 0.5, 38.0}, {5.0, 1.0, 10.4}, {5.0, 2.0, 4.01},
};

TEST(CusumArlMarkov, MatchesPublishedTwoSidedTables) {
  for (const TableRow& r : kTable) {
    const double arl = TwoSidedMarkov(r.h, 0.5, r.mu);
    EXPECT_LT(Rel(arl, r.arl), 0.02) << "h=" << r.h << " mu=" << r.mu << " Markov two-sided "
                                     << arl << " table (memory) " << r.arl;
  }
}

// The one-sided in-control ARL is twice the table's two-sided value (the two
// sides are mirror images at mu = 0): 2 x 168 and 2 x 465 (memory, as above).
// Out of control the lower side almost never fires, so one- and two-sided
// agree with the table: 8.38 and 10.4 at mu = 1 (memory, as above).
TEST(CusumArlMarkov, OneSidedValuesAndTheTables) {
  EXPECT_LT(Rel(CusumArlMarkov(4.0, 0.5, 0.0), 2.0 * 168.0), 0.02);
  EXPECT_LT(Rel(CusumArlMarkov(5.0, 0.5, 0.0), 2.0 * 465.0), 0.02);
  EXPECT_LT(Rel(CusumArlMarkov(4.0, 0.5, 1.0), 8.38), 0.02);
  EXPECT_LT(Rel(CusumArlMarkov(5.0, 0.5, 1.0), 10.4), 0.02);
  // Page integral equation (Goel & Wu 1971) solved by Gauss-Legendre Nystrom
  // with 64 and 128 nodes, which agree to 1e-11 (the method of
  // tests/ref/arl_check.py): 335.3676, 930.8870, 8.383202, 10.375975.
  EXPECT_LT(Rel(CusumArlMarkov(4.0, 0.5, 0.0), 335.3676), 2e-4);
  EXPECT_LT(Rel(CusumArlMarkov(5.0, 0.5, 0.0), 930.8870), 2e-4);
  EXPECT_LT(Rel(CusumArlMarkov(4.0, 0.5, 1.0), 8.383202), 2e-4);
  EXPECT_LT(Rel(CusumArlMarkov(5.0, 0.5, 1.0), 10.375975), 2e-4);
}

// Brook & Evans (1972): the chain converges as the states grow; with
// midpoint representatives the error falls as w^2, so each doubling of the
// states divides the change by about 4, and Richardson extrapolation lands on
// the integral-equation value (930.8870, as above).
TEST(CusumArlMarkov, ConvergesAsStatesGrow) {
  const double l50 = CusumArlMarkov(5.0, 0.5, 0.0, 50);
  const double l100 = CusumArlMarkov(5.0, 0.5, 0.0, 100);
  const double l200 = CusumArlMarkov(5.0, 0.5, 0.0, 200);
  const double l400 = CusumArlMarkov(5.0, 0.5, 0.0, 400);
  const double d1 = std::fabs(l100 - l50), d2 = std::fabs(l200 - l100), d3 = std::fabs(l400 - l200);
  EXPECT_GT(d1 / d2, 3.0);
  EXPECT_LT(d1 / d2, 5.0);
  EXPECT_GT(d2 / d3, 3.0);
  EXPECT_LT(d2 / d3, 5.0);
  EXPECT_LT(Rel(l400 + (l400 - l200) / 3.0, 930.8870), 1e-5);
}

// Richardson extrapolation on that w^2 law: 200 states land within 2e-5 of
// the integral-equation value (as above). Far outside the chain's comfort
// (k = 0.01, h = 248, w = 0.83 with 600 states) the plain chain is 5.6 %
// short and the extrapolation under 1.5 %: reference 699 860, from the same
// chain with 2400 and 4800 states, extrapolated (computed in numpy for this
// test).
TEST(CusumArlMarkovRichardson, RemovesMostOfTheDiscretisationError) {
  EXPECT_LT(Rel(CusumArlMarkovRichardson(5.0, 0.5, 0.0, 200), 930.8870), 2e-5);
  EXPECT_LT(Rel(CusumArlMarkovRichardson(4.0, 0.5, 1.0, 200), 8.383202), 2e-5);
  const double plain = CusumArlMarkov(248.0, 0.01, 0.0, 600);
  const double extrapolated = CusumArlMarkovRichardson(248.0, 0.01, 0.0, 600);
  EXPECT_GT(Rel(plain, 699860.0), 0.04);
  EXPECT_LT(Rel(extrapolated, 699860.0), 0.015);
  EXPECT_TRUE(std::isnan(CusumArlMarkovRichardson(4.0, 0.5, 0.0, 3)));
}

// With h = 0 the CUSUM alarms at the first z > k: the run length is
// geometric with mean 1 / (1 - Phi(k - mu)), and the chain is exact.
TEST(CusumArlMarkov, ZeroThresholdIsGeometric) {
  for (double mu : {0.0, 0.5, 1.5}) {
    const double p = 0.5 * std::erfc((0.5 - mu) / std::sqrt(2.0));
    EXPECT_NEAR(CusumArlMarkov(0.0, 0.5, mu), 1.0 / p, 1e-9 / p);
  }
}

TEST(CusumArlMarkov, RejectsBadInput) {
  EXPECT_TRUE(std::isnan(CusumArlMarkov(-1.0, 0.5, 0.0)));
  EXPECT_TRUE(std::isnan(CusumArlMarkov(4.0, 0.5, 0.0, 1)));
  EXPECT_TRUE(std::isnan(CusumArlMarkov(NAN, 0.5, 0.0)));
  EXPECT_TRUE(std::isnan(CusumArlSiegmund(4.0, INFINITY, 0.0)));
}

// A Monte Carlo of the one-sided CUSUM itself (fixed seed, 20000 runs): the
// standard error is about ARL / sqrt(20000) = 0.7 % of the ARL, so 3 % is
// over four standard errors.
double SimulatedCusumArl(double h, double k, double mu, int runs, uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> normal(mu, 1.0);
  double total = 0.0;
  for (int r = 0; r < runs; ++r) {
    double s = 0.0;
    int64_t n = 0;
    do {
      s = std::fmax(0.0, s + normal(rng) - k);
      ++n;
    } while (s <= h);
    total += static_cast<double>(n);
  }
  return total / runs;
}

TEST(CusumArlMarkov, AgreesWithMonteCarloOfTheOneSidedCusum) {
  EXPECT_LT(Rel(SimulatedCusumArl(4.0, 0.5, 0.0, 20000, 11), CusumArlMarkov(4.0, 0.5, 0.0)), 0.03);
  EXPECT_LT(Rel(SimulatedCusumArl(4.0, 0.5, 1.0, 20000, 12), CusumArlMarkov(4.0, 0.5, 1.0)), 0.03);
}

// ---------------------------------------------------------------------------
// Siegmund (1985)
// ---------------------------------------------------------------------------

// Coarser than the chain: within 1 % of it in control and at small shifts,
// within 5 % at mu = 2 (h = 4: 3.22 against 3.34), computed here; against the
// two-sided tables (memory, as above) within 1 % in control.
TEST(CusumArlSiegmund, CloseToMarkovAndTables) {
  for (double h : {4.0, 5.0}) {
    for (double mu : {0.0, 0.5, 1.0}) {
      EXPECT_LT(Rel(CusumArlSiegmund(h, 0.5, mu), CusumArlMarkov(h, 0.5, mu)), 0.01)
          << "h=" << h << " mu=" << mu;
    }
    EXPECT_LT(Rel(CusumArlSiegmund(h, 0.5, 2.0), CusumArlMarkov(h, 0.5, 2.0)), 0.05);
  }
  EXPECT_LT(Rel(CusumArlTwoSided(CusumArlSiegmund(4.0, 0.5, 0.0), CusumArlSiegmund(4.0, 0.5, 0.0)),
                168.0), 0.01);
  EXPECT_LT(Rel(CusumArlTwoSided(CusumArlSiegmund(5.0, 0.5, 0.0), CusumArlSiegmund(5.0, 0.5, 0.0)),
                465.0), 0.02);
  EXPECT_LT(Rel(CusumArlSiegmund(4.0, 0.5, 1.0), 8.38), 0.01);
  EXPECT_LT(Rel(CusumArlSiegmund(5.0, 0.5, 1.0), 10.4), 0.01);
}

// D = mu - k = 0: the limit b^2 (Siegmund 1985), reached smoothly.
TEST(CusumArlSiegmund, ZeroDriftLimit) {
  const double b = 4.0 + 1.166;
  EXPECT_DOUBLE_EQ(CusumArlSiegmund(4.0, 0.5, 0.5), b * b);
  EXPECT_NEAR(CusumArlSiegmund(4.0, 0.5, 0.5 + 1e-7), b * b, 1e-5);
  EXPECT_NEAR(CusumArlSiegmund(4.0, 0.5, 0.5 - 1e-7), b * b, 1e-5);
  // Either side of the switch to the series, the closed form agrees.
  const double x_small = 0.99e-3, x_big = 1.01e-3;  // x = -2 D b
  const double a1 = CusumArlSiegmund(4.0, 0.5, 0.5 - x_small / (2.0 * b));
  const double a2 = CusumArlSiegmund(4.0, 0.5, 0.5 - x_big / (2.0 * b));
  EXPECT_NEAR(a1, a2, 2e-3 * b * b);
}

// ---------------------------------------------------------------------------
// Thresholds
// ---------------------------------------------------------------------------

TEST(CusumThresholdForArl, RoundTrip) {
  for (double k : {0.25, 0.5, 1.0}) {
    for (double arl0 : {100.0, 1e3, 1e5}) {
      const double hs = CusumThresholdForArl(arl0, k, /*markov=*/false);
      EXPECT_LT(Rel(CusumArlSiegmund(hs, k, 0.0), arl0), 1e-9) << "k=" << k << " arl0=" << arl0;
      const double hm = CusumThresholdForArl(arl0, k, /*markov=*/true);
      // The solver uses the extrapolated chain with 200 states, more for
      // h > 10: compare with a finer one.
      EXPECT_LT(Rel(CusumArlMarkovRichardson(hm, k, 0.0, 600), arl0), 2e-4)
          << "k=" << k << " arl0=" << arl0;
      EXPECT_NEAR(hs, hm, 0.05 * (1.0 + hm));
    }
  }
  // Back to the table's design point: one-sided ARL0 335.37 is h = 4.
  EXPECT_NEAR(CusumThresholdForArl(335.3676, 0.5), 4.0, 1e-3);
}

TEST(CusumThresholdForArl, EdgeCases) {
  // At h = 0 the ARL is 1 / (1 - Phi(0.5)) = 3.24: a looser budget needs h = 0.
  EXPECT_EQ(CusumThresholdForArl(2.0, 0.5), 0.0);
  EXPECT_TRUE(std::isnan(CusumThresholdForArl(1.0, 0.5)));
  EXPECT_TRUE(std::isnan(CusumThresholdForArl(NAN, 0.5)));
  EXPECT_TRUE(std::isnan(CusumThresholdForArl(1e300, 0.01)));  // h beyond 1000
}

// ---------------------------------------------------------------------------
// Lorden (1971)
// ---------------------------------------------------------------------------

// The bound is a first-order asymptote: the CUSUM tuned to delta approaches
// it as arl0 grows, but from below, by about 2 (1 + ln(2/delta^2))/delta^2
// samples (3.39 at delta = 1, Siegmund's approximation; see arl.h). So the
// check is the ratio climbing towards 1 and the gap staying near that
// constant, not "bound below the CUSUM" (which fails at every finite arl0
// here: 15.1 < 18.4 at arl0 = 1e4).
TEST(CusumDelayBound, CusumApproachesLordenAsymptote) {
  EXPECT_DOUBLE_EQ(CusumDelayBound(1e6, 1.0), 2.0 * std::log(1e6));
  EXPECT_DOUBLE_EQ(CusumDelayBound(1e6, 2.0), 0.5 * std::log(1e6));
  const double delta = 1.0, k = 0.5;
  double previous_ratio = 0.0;
  for (double arl0 : {1e4, 1e6, 1e8}) {
    const double h = CusumThresholdForArl(arl0, k);
    const double arl1 = CusumArlMarkov(h, k, delta, 400);
    const double bound = CusumDelayBound(arl0, delta);
    const double ratio = arl1 / bound;
    EXPECT_GT(ratio, previous_ratio) << "arl0=" << arl0;
    EXPECT_LT(ratio, 1.0);
    EXPECT_NEAR(arl1 - bound, -2.0 * (1.0 + std::log(2.0)), 0.2) << "arl0=" << arl0;
    previous_ratio = ratio;
  }
  EXPECT_GT(previous_ratio, 0.9);  // at arl0 = 1e8
  EXPECT_TRUE(std::isnan(CusumDelayBound(1.0, 1.0)));
  EXPECT_TRUE(std::isnan(CusumDelayBound(100.0, 0.0)));
}

// ---------------------------------------------------------------------------
// Autocorrelation
// ---------------------------------------------------------------------------

TEST(CusumArlAutocorrelatedInflation, Values) {
  EXPECT_DOUBLE_EQ(CusumArlAutocorrelatedInflation(0.0), 1.0);
  EXPECT_DOUBLE_EQ(CusumArlAutocorrelatedInflation(0.5), 3.0);
  EXPECT_DOUBLE_EQ(CusumArlAutocorrelatedInflation(-0.5), 1.0 / 3.0);
  EXPECT_DOUBLE_EQ(CusumArlAutocorrelatedInflation(0.9), 19.0);
  EXPECT_TRUE(std::isnan(CusumArlAutocorrelatedInflation(1.0)));
  EXPECT_TRUE(std::isnan(CusumArlAutocorrelatedInflation(-1.0)));
}

// Variance of a sum of n AR(1) samples against n Var(x) (1+phi)/(1-phi), by
// Monte Carlo (fixed seed; 2000 sums of 2000 samples: relative standard
// error of the variance about sqrt(2/2000) = 3 %; the finite-n correction
// 2 phi (1 - phi^n) / (n (1 - phi)^2) = 0.002 is negligible).
TEST(CusumArlAutocorrelatedInflation, MatchesSimulatedSums) {
  const double phi = 0.5;
  const int n = 2000, reps = 2000;
  std::mt19937_64 rng(7);
  std::normal_distribution<double> normal(0.0, 1.0);
  const double sd_x = 1.0 / std::sqrt(1.0 - phi * phi);  // stationary, unit innovations
  double sum_sq = 0.0;
  for (int r = 0; r < reps; ++r) {
    double x = sd_x * normal(rng), sum = 0.0;
    for (int i = 0; i < n; ++i) {
      sum += x;
      x = phi * x + normal(rng);
    }
    sum_sq += sum * sum;
  }
  const double ratio = sum_sq / reps / (n * sd_x * sd_x);
  EXPECT_LT(Rel(ratio, CusumArlAutocorrelatedInflation(phi)), 0.12) << ratio;
}

// ---------------------------------------------------------------------------
// False-alarm budget
// ---------------------------------------------------------------------------

TEST(ArlFromBudget, Arithmetic) {
  const double ninety_days_s = 90.0 * 86400.0;  // 7 776 000 s
  EXPECT_DOUBLE_EQ(ArlFromBudget(ninety_days_s, 1.0, 1), 7776000.0);
  EXPECT_DOUBLE_EQ(ArlFromBudget(ninety_days_s, 1.0, 5), 38880000.0);
  EXPECT_DOUBLE_EQ(ArlFromBudget(ninety_days_s, 10.0, 5), 3888000.0);
  // The bank's summed false-alarm rate is the declared one.
  const int n = 5;
  const double dt = 2.0, arl = ArlFromBudget(ninety_days_s, dt, n);
  EXPECT_NEAR(n / (arl * dt), 1.0 / ninety_days_s, 1e-12 / ninety_days_s);
  EXPECT_TRUE(std::isnan(ArlFromBudget(0.0, 1.0, 1)));
  EXPECT_TRUE(std::isnan(ArlFromBudget(100.0, -1.0, 1)));
  EXPECT_TRUE(std::isnan(ArlFromBudget(100.0, 1.0, 0)));
}

// ---------------------------------------------------------------------------
// A CUSUM from the budget
// ---------------------------------------------------------------------------

TEST(DesignCusum, FromDefaults) {
  CusumDesignOptions o;
  std::string why;
  ASSERT_TRUE(o.IsValid(&why)) << why;
  const CusumDesign d = DesignCusum(o);
  ASSERT_TRUE(d.ok) << d.reason;
  EXPECT_DOUBLE_EQ(d.k, 0.5);
  EXPECT_DOUBLE_EQ(d.arl0_samples, 5.0 * 90.0 * 86400.0);
  // h is near 15.6, solved with the extrapolated 312-state chain: against
  // the extrapolated 600-state one.
  EXPECT_LT(Rel(CusumArlMarkovRichardson(d.h, d.k, 0.0, 600), d.arl0_samples), 2e-4);
  EXPECT_LT(Rel(d.arl1_samples, CusumArlMarkovRichardson(d.h, d.k, 1.0, 600)), 2e-4);
  EXPECT_DOUBLE_EQ(d.delay_s, d.arl1_samples);
  EXPECT_NE(d.ToString().find("k=0.5"), std::string::npos) << d.ToString();
  EXPECT_NE(d.Report().find("decision interval"), std::string::npos);
}

TEST(DesignCusum, AutocorrelationShrinksTheShift) {
  CusumDesignOptions o;
  o.ar1_phi = 0.5;
  const CusumDesign d = DesignCusum(o);
  ASSERT_TRUE(d.ok) << d.reason;
  EXPECT_DOUBLE_EQ(d.sigma_inflation, 3.0);
  EXPECT_NEAR(d.shift_z, 1.0 / std::sqrt(3.0), 1e-15);
  EXPECT_NEAR(d.k, 0.5 / std::sqrt(3.0), 1e-15);
  const CusumDesign d0 = DesignCusum(CusumDesignOptions{});
  EXPECT_GT(d.arl1_samples, d0.arl1_samples);  // smaller standardised shift, slower
}

TEST(DesignCusum, OptionsValidation) {
  std::string why;
  CusumDesignOptions o;
  o.target_shift_sigma = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("target_shift_sigma"), std::string::npos);
  o = {};
  o.ar1_phi = 1.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("ar1_phi"), std::string::npos);
  o = {};
  o.detectors_in_bank = 0;
  EXPECT_FALSE(o.IsValid(&why));
  o = {};
  o.detectors_in_bank = 1;
  o.sample_interval_s = o.false_alarm_interval_s;  // ARL0 of one sample
  EXPECT_FALSE(o.IsValid(&why));
  const CusumDesign d = DesignCusum(o);
  EXPECT_FALSE(d.ok);
  EXPECT_NE(d.ToString().find("invalid"), std::string::npos);
}

// ---------------------------------------------------------------------------
// SPRT (Wald 1945)
// ---------------------------------------------------------------------------

// The bounds are the formula itself: ln(0.9/0.05) = ln 18 and ln(0.1/0.95).
TEST(WaldBounds, Exact) {
  const SprtBounds b = WaldBounds(0.05, 0.10);
  EXPECT_NEAR(b.upper, std::log(18.0), 1e-15);
  EXPECT_NEAR(b.lower, std::log(0.1 / 0.95), 1e-15);
  const SprtBounds s = WaldBounds(0.01, 0.01);
  EXPECT_NEAR(s.upper, std::log(99.0), 1e-14);
  EXPECT_NEAR(s.lower, -std::log(99.0), 1e-14);
  EXPECT_TRUE(std::isnan(WaldBounds(0.0, 0.1).upper));
  EXPECT_TRUE(std::isnan(WaldBounds(0.6, 0.5).lower));
}

// ln of the ratio of the N(delta, 1) and N(0, 1) densities.
TEST(SprtLlrIncrement, IsTheLogDensityRatio) {
  for (double z : {-2.0, 0.0, 0.3, 1.7}) {
    for (double delta : {0.2, 1.0, -0.5}) {
      const double direct = -0.5 * (z - delta) * (z - delta) + 0.5 * z * z;
      EXPECT_NEAR(SprtLlrIncrement(z, delta), direct, 1e-14);
    }
  }
  EXPECT_DOUBLE_EQ(SprtLlrIncrement(1.0, 0.5), 0.375);
}

// Wald's OC: L(0) = 1 - alpha, L(delta) = beta exactly under his
// approximations; A/(A - B) at delta/2; decreasing in mu; no overflow.
TEST(SprtOperatingCharacteristic, Values) {
  const double alpha = 0.05, beta = 0.1, delta = 0.5;
  const SprtBounds b = WaldBounds(alpha, beta);
  EXPECT_NEAR(SprtOperatingCharacteristic(alpha, beta, delta, 0.0), 1.0 - alpha, 1e-13);
  EXPECT_NEAR(SprtOperatingCharacteristic(alpha, beta, delta, delta), beta, 1e-13);
  EXPECT_NEAR(SprtOperatingCharacteristic(alpha, beta, delta, 0.5 * delta),
              b.upper / (b.upper - b.lower), 1e-12);
  EXPECT_NEAR(SprtOperatingCharacteristic(alpha, beta, delta, 0.5 * delta + 1e-9),
              b.upper / (b.upper - b.lower), 1e-7);
  double previous = 2.0;
  for (double mu = -50.0; mu <= 50.0; mu += 0.25) {
    const double oc = SprtOperatingCharacteristic(alpha, beta, delta, mu);
    ASSERT_TRUE(std::isfinite(oc)) << mu;
    EXPECT_LE(oc, previous) << mu;
    previous = oc;
  }
  EXPECT_NEAR(SprtOperatingCharacteristic(alpha, beta, delta, -50.0), 1.0, 1e-12);
  EXPECT_NEAR(SprtOperatingCharacteristic(alpha, beta, delta, 50.0), 0.0, 1e-12);
}

// Closed forms at mu = 0, delta and delta/2 (Wald 1945/1947), and continuity
// through delta/2 where the general formula is 0/0.
TEST(SprtAverageSampleNumber, SpecialCases) {
  const double alpha = 0.05, beta = 0.1, delta = 0.5;
  const SprtBounds b = WaldBounds(alpha, beta);
  const double a = b.upper, l = b.lower;
  EXPECT_NEAR(SprtAverageSampleNumber(alpha, beta, delta, 0.0),
              ((1 - alpha) * l + alpha * a) / (-0.5 * delta * delta), 1e-10);
  EXPECT_NEAR(SprtAverageSampleNumber(alpha, beta, delta, delta),
              (beta * l + (1 - beta) * a) / (0.5 * delta * delta), 1e-10);
  const double mid = -a * l / (delta * delta);
  EXPECT_NEAR(SprtAverageSampleNumber(alpha, beta, delta, 0.5 * delta), mid, 1e-12);
  EXPECT_NEAR(SprtAverageSampleNumber(alpha, beta, delta, 0.5 * delta + 1e-5), mid, 1e-4 * mid);
  EXPECT_NEAR(SprtAverageSampleNumber(alpha, beta, delta, 0.5 * delta - 1e-3), mid, 1e-3 * mid);
  EXPECT_TRUE(std::isnan(SprtAverageSampleNumber(alpha, beta, 0.0, 0.0)));
}

// A Monte Carlo of the SPRT itself: z ~ N(mu, 1), LLR += delta z - delta^2/2
// until it leaves (lower, upper); mean number of samples.
double SimulatedSprtAsn(double alpha, double beta, double delta, double mu, int runs,
                        uint64_t seed) {
  const SprtBounds b = WaldBounds(alpha, beta);
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> normal(mu, 1.0);
  double total = 0.0;
  for (int r = 0; r < runs; ++r) {
    double llr = 0.0;
    int64_t n = 0;
    do {
      llr += SprtLlrIncrement(normal(rng), delta);
      ++n;
    } while (llr > b.lower && llr < b.upper);
    total += static_cast<double>(n);
  }
  return total / runs;
}

// Small shift (delta = 0.2, alpha = beta = 0.001), where the overshoot Wald
// neglects is small against the bounds (+/- 6.9): Wald's ASN within 5 % of
// the simulation (fixed seed, 20000 runs; standard error under 1 %), and
// below it, since the overshoot only lengthens the test. Measured: 2 % low
// at mu = 0 and delta, 3 % at delta/2.
class SprtAsnMonteCarlo : public ::testing::TestWithParam<double> {};

TEST_P(SprtAsnMonteCarlo, WaldWithinFivePercent) {
  const double alpha = 0.001, beta = 0.001, delta = 0.2;
  const double mu = GetParam() * delta;
  const double wald = SprtAverageSampleNumber(alpha, beta, delta, mu);
  const double simulated = SimulatedSprtAsn(alpha, beta, delta, mu, 20000, 2024);
  EXPECT_LT(Rel(wald, simulated), 0.05) << "mu=" << mu << " Wald " << wald << " MC " << simulated;
  EXPECT_LT(wald, simulated);
}

INSTANTIATE_TEST_SUITE_P(MuOverDelta, SprtAsnMonteCarlo,
                         ::testing::Values(-0.5, 0.0, 0.5, 1.0, 1.5));

// At delta = 1 the overshoot is comparable with the bounds (ln 19 = 2.94):
// Wald's ASN is more than 15 % short (measured 23 %). Documented limitation.
TEST(SprtAverageSampleNumber, UnderestimatesForLargeShifts) {
  const double wald = SprtAverageSampleNumber(0.05, 0.05, 1.0, 0.0);
  const double simulated = SimulatedSprtAsn(0.05, 0.05, 1.0, 0.0, 20000, 99);
  EXPECT_LT(wald, 0.85 * simulated) << wald << " vs " << simulated;
}

}  // namespace
}  // namespace holdfast
