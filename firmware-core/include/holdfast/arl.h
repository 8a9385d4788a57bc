// Sequential-test theory for the leak decision: run lengths of the CUSUM,
// thresholds from a false-alarm budget, and Wald's SPRT. Pure functions, no
// state; the detectors that use them live elsewhere.
//
// Conventions. The detector sees standardised residuals z_t = (r_t - bias) /
// (sigma * sqrt(inflation)), z ~ N(mu, 1). The one-sided upper CUSUM (Page
// 1954) is
//     S_0 = 0,  S_t = max(0, S_{t-1} + z_t - k),  alarm at the first t with S_t > h,
// and its average run length ARL(h, k, mu) is the mean of that t, in samples,
// starting from S_0 = 0 (the "zero-state" ARL). A leak can only make mass go
// missing, so the leak detectors are one-sided and every function below is
// one-sided unless its name says otherwise.
//
// Beware of published ARL tables: the well-known tables for k = 0.5
// (Montgomery, Introduction to Statistical Quality Control, and the
// NIST/SEMATECH e-Handbook of Statistical Methods, sec. 6.3.2.3) list the
// TWO-sided scheme (an upper and a lower CUSUM, alarm from either), whose
// in-control ARL is half the one-sided one: 168 and 465 for h = 4 and 5,
// against 335.4 and 930.9 one-sided. Out of control the lower side hardly
// ever fires and the two agree (8.38 and 10.4 at mu = 1). Combine with
// CusumArlTwoSided() before comparing with those tables.
#pragma once

#include <string>

namespace holdfast {

// ---------------------------------------------------------------------------
// 1. CUSUM average run length
// ---------------------------------------------------------------------------

// One-sided CUSUM ARL by Siegmund's approximation (Siegmund 1985, Sequential
// Analysis: the corrected-diffusion approximation, the constant 1.166 being
// twice the expected overshoot of a Gaussian random walk; as given in
// Montgomery, Introduction to Statistical Quality Control, CUSUM chapter):
//     ARL = (exp(-2 D b) + 2 D b - 1) / (2 D^2),  D = mu - k,  b = h + 1.166,
// and ARL = b^2 in the limit D = 0 (evaluated by its series near D = 0, so
// the function is smooth through it). Against the integral equation
// (tests/ref/arl_check.py): within 1 % for |mu - k| <= 0.5 and h >= 2 (so in
// control at k <= 0.5); 5.6-7 % high at mu - k = -1 (in control at k = 1:
// 15344 against 14511 at h = 4, so a threshold from it is a little low);
// 2-6 % low at mu - k = 1.5 (runs of a few samples), 15 % at h = 1. NaN for
// non-finite input or h < 0.
double CusumArlSiegmund(double h, double k, double mu);

// One-sided CUSUM ARL by the Markov-chain approximation of Brook & Evans
// (1972, Biometrika 59, 539-548; the ARL vector solves (I - R) L = 1, with
// the zero state taking the mass at and just above zero): the interval
// [0, h] is split into `states` transient states of width
// w = 2h/(2*states - 1); state 0 is the CUSUM at zero together with
// (0, w/2], state i >= 1 is ((i - 1/2) w, (i + 1/2) w] represented by its
// midpoint i*w, and S > h = (states - 1/2) w is the absorbing alarm state.
// The transition matrix R among the transient states is
//     R[i][0] = Phi(w/2 - i w + k - mu),
//     R[i][j] = Phi((j - i + 1/2) w + k - mu) - Phi((j - i - 1/2) w + k - mu),
// and the ARLs from every state solve (I - R) L = 1 (dense LU, partial
// pivoting); the result is L[0]. The error falls as w^2 and grows with h:
// in control at k = 0.5, 0.25 % at h = 5 with 50 states (w = 0.1), 0.015 %
// with 200 (w = 0.025); 0.3 % at h = 15.6 with 312 states (w = 0.05), 0.07 %
// with 600. Cost O(states^3): a few milliseconds for 200 states, some tens
// for 600. NaN for non-finite input, h < 0 or states < 2; +inf when the alarm
// is out of reach in double precision.
double CusumArlMarkov(double h, double k, double mu, int states = 200);

// The chain's ARL with `states` and with states/2 states, extrapolated to
// zero width on the chain's w^2 error (Richardson 1911, the deferred
// approach to the limit; the w^2 law is checked in
// tests/core/arl_test.cc): L = L_m + (L_m - L_m/2) / (r^2 - 1), r the ratio
// of the widths. Costs 1.125 times the plain chain and removes nearly all of
// its error while w is small against sigma: in control at k = 0.5, h = 15.6
// with 600 states, 0.07 % -> 0.003 %; at k = 0.01, h = 248 (w = 0.8, far too
// coarse for the plain chain, 5.6 % short) about 0.9 % short. NaN for
// states < 4.
double CusumArlMarkovRichardson(double h, double k, double mu, int states = 200);

// ARL of the two-sided scheme (an upper CUSUM at shift mu and a lower one,
// which by symmetry sees -mu) from the one-sided ARLs of the two sides:
// 1/ARL = 1/ARL_upper + 1/ARL_lower (the relation given with the two-sided
// tables in Montgomery, CUSUM chapter, and used by Lucas & Crosier 1982,
// Technometrics 24; from memory). A Monte Carlo of the two-sided scheme
// (h = 4, k = 0.5, 1e5 runs) gave 167.9 +/- 0.5 against 167.7 from it. Only
// for comparison with two-sided tables: for the upper CUSUM at shift mu, pass
// ARL(h, k, mu) and ARL(h, k, -mu).
double CusumArlTwoSided(double arl_upper, double arl_lower);

// ---------------------------------------------------------------------------
// 2. Thresholds and bounds
// ---------------------------------------------------------------------------

// The decision interval h >= 0 at which the one-sided in-control ARL
// (mu = 0) equals arl0 samples, for reference value k. ARL(h) is increasing
// in h; the root of ln ARL(h) - ln arl0 is bracketed around the Siegmund
// solution and refined by the Illinois variant of regula falsi (Dowell &
// Jarratt 1971), to |dh| <= 1e-9 (1 + h). With markov = true the ARL is
// CusumArlMarkovRichardson with states = clamp(20 h, 200, 600) fixed from
// the Siegmund estimate of h (so the function being solved is continuous),
// which puts the ARL within 0.01 % of the converged chain for h up to about
// 20 and within about 1 % at h = 250 (small k with a large budget); with
// markov = false it is CusumArlSiegmund. Returns 0 when even h = 0 gives
// an ARL above arl0 (the budget is looser than the smallest threshold), and
// NaN for arl0 <= 1, non-finite input, or when h would exceed 1000.
double CusumThresholdForArl(double arl0, double k, bool markov = true);

// Lorden's (1971, Ann. Math. Statist. 42, 1897-1908) asymptotic lower bound
// on the worst-case detection delay of any procedure whose in-control ARL is
// at least arl0, for a Gaussian mean shift delta (sigma units; Kullback-
// Leibler information delta^2/2 per sample):
//     delay >= 2 ln(arl0) / delta^2  samples  (1 + o(1)) as arl0 -> infinity.
// It is a first-order asymptote, not a bound at finite arl0: the CUSUM
// tuned to delta (k = delta/2, optimal by Moustakides 1986) reaches it as
// arl0 grows but from BELOW, by about 2 (1 + ln(2/delta^2)) / delta^2
// samples (Siegmund's approximation): 3.3 samples at delta = 1, so a CUSUM
// at arl0 = 1e6 takes 24.3 samples against the asymptote's 27.6. Use it as a
// yardstick of order, not as a floor. NaN for arl0 <= 1 or delta == 0.
double CusumDelayBound(double arl0, double delta);

// Variance inflation of a sum of n AR(1) samples x_t = phi x_{t-1} + e_t for
// large n: Var(sum) / (n Var(x)) -> (1 + phi) / (1 - phi), the long-run
// variance of an AR(1) (sum of the autocorrelations phi^|j| over all lags;
// textbook result, e.g. Box & Jenkins, Time Series Analysis; from memory). The
// CUSUM is a running sum, so the detector standardises by
// sigma * sqrt(inflation) to keep its ARL roughly at the independent-sample
// value; this holds when runs are long compared with the correlation time
// 1/(1 - phi) samples (in control, small shifts) and over-corrects for large
// shifts, which alarm within a few samples. Prewhitening is the exact cure.
// NaN unless -1 < phi < 1; phi < 0 gives an inflation below 1.
double CusumArlAutocorrelatedInflation(double phi);

// In-control ARL (samples) each detector must have so that a bank of
// `detectors_in_bank` detectors on one segment raises false alarms no more
// often than once per false_alarm_interval_s, sampling every
// sample_interval_s:
//     per-detector ARL = detectors_in_bank * false_alarm_interval_s / sample_interval_s.
// Each detector raises false alarms at the rate 1 / (ARL dt) (renewal: it
// restarts after an alarm); the bank's rate is at most the sum of the n rates
// (union bound), and setting that sum to 1 / interval gives the formula. The
// union bound is conservative: the detectors of a bank watch the same
// residual, so their false alarms come together and the bank's actual rate is
// lower than the sum (the true mean time between bank false alarms is longer
// than declared). NaN for non-positive or non-finite times or n < 1.
double ArlFromBudget(double false_alarm_interval_s, double sample_interval_s,
                     int detectors_in_bank);

// ---------------------------------------------------------------------------
// 3. A CUSUM designed from a false-alarm budget
// ---------------------------------------------------------------------------

struct CusumDesignOptions {
  // Leak the detector is tuned for: the per-sample mean shift of the
  // residual, in units of the residual's per-sample sigma (before the
  // autocorrelation inflation).
  double target_shift_sigma = 1.0;
  // Declared budget: mean time between false alarms of the whole bank on one
  // segment (primer sec. 4: one per segment per 90 days).
  double false_alarm_interval_s = 90.0 * 86400.0;
  // Time between samples the detector sees.
  double sample_interval_s = 1.0;
  // Detectors sharing the budget (the bank's leak sizes).
  int detectors_in_bank = 5;
  // Lag-one autocorrelation of the residual (AR(1) coefficient), in (-1, 1).
  double ar1_phi = 0.0;
  // Markov-chain ARL (true) or Siegmund's approximation (false).
  bool markov = true;

  bool IsValid(std::string* why) const;  // false, with the reason, when unusable
};

struct CusumDesign {
  bool ok = false;
  std::string reason;               // why not, when !ok
  double sigma_inflation = 1.0;     // (1 + phi)/(1 - phi): standardise by sigma * sqrt(this)
  double shift_z = 0.0;             // target shift in standardised units
  double k = 0.0;                   // reference value, shift_z / 2
  double h = 0.0;                   // decision interval
  double arl0_samples = 0.0;        // per-detector in-control ARL (from the budget)
  double arl1_samples = 0.0;        // ARL at the target shift (Markov or Siegmund)
  double delay_bound_samples = 0.0; // Lorden's asymptote at the target shift
  double delay_s = 0.0;             // arl1_samples * sample interval

  std::string ToString() const;  // one line, for logs and test failures
  std::string Report() const;    // several lines, every field
};

// k = shift_z / 2 (Page 1954: the optimal reference value for a known shift),
// arl0 from ArlFromBudget, h from CusumThresholdForArl, the out-of-control
// ARL at shift_z, and Lorden's asymptote for comparison.
CusumDesign DesignCusum(const CusumDesignOptions& options);

// ---------------------------------------------------------------------------
// 4. Wald's sequential probability ratio test
// ---------------------------------------------------------------------------

// Thresholds on the cumulative log-likelihood ratio: accept H1 (leak) at
// LLR >= upper, accept H0 at LLR <= lower.
struct SprtBounds {
  double lower = 0.0;
  double upper = 0.0;
};

// Wald (1945, Ann. Math. Statist. 16, 117-186; Sequential Analysis 1947):
// upper = ln((1 - beta)/alpha), lower = ln(beta/(1 - alpha)),
// for target error probabilities alpha (false alarm) and beta (miss). They
// ignore the overshoot of the LLR over the bounds, so the realised errors
// are slightly smaller than the targets (alpha' + beta' <= alpha + beta).
// NaN bounds unless 0 < alpha, beta and alpha + beta < 1.
SprtBounds WaldBounds(double alpha, double beta);

// Increment of the LLR for N(delta, 1) against N(0, 1) at observation z
// (sigma units): ln(f1(z)/f0(z)) = delta z - delta^2 / 2 (Wald 1947, the
// test for the mean of a normal distribution).
double SprtLlrIncrement(double z, double delta);

// Wald's operating characteristic: probability that the SPRT ends accepting
// H0 when z ~ N(mu, 1) (Wald 1945/1947, the OC function):
//     L(mu) = (e^{hA} - 1) / (e^{hA} - e^{hB}),  h = 1 - 2 mu / delta,
// A = upper, B = lower bound, h the non-zero root of E[exp(h X)] = 1 for the
// increment X ~ N(delta (mu - delta/2), delta^2); L = A / (A - B) at h = 0.
// Evaluated without overflow for any mu. Overshoot ignored (as in Wald).
double SprtOperatingCharacteristic(double alpha, double beta, double delta, double mu);

// Wald's approximation to the average sample number (Wald 1945/1947, from
// Wald's identity E[LLR at stop] = E[X] ASN; overshoot ignored):
//     ASN(mu) = (L B + (1 - L) A) / E[X],  E[X] = delta (mu - delta / 2),
// with L the operating characteristic, which gives
//     ASN(0)     = ((1 - alpha) B + alpha A) / (-delta^2 / 2),
//     ASN(delta) = (beta B + (1 - beta) A) / (delta^2 / 2),
// and at mu = delta/2, where E[X] = 0, ASN = -A B / E[X^2] = -A B / delta^2
// (Wald's second identity). Ignoring the overshoot (about 0.58 delta per
// crossing) makes this an underestimate. Against a Monte Carlo of the SPRT
// (2e4 runs): 23 % low (32 % at mu = delta/2) for delta = 1,
// alpha = beta = 0.05; 2 % low (4 % at mu = delta/2) for delta = 0.25,
// alpha = beta = 0.001. Good for the small shifts of small leaks only.
// NaN for invalid alpha/beta or delta == 0.
double SprtAverageSampleNumber(double alpha, double beta, double delta, double mu);

}  // namespace holdfast
