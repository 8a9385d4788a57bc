#include "holdfast/arl.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <vector>

#include <Eigen/Dense>

namespace holdfast {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kSqrtHalf = 0.70710678118654752440;
constexpr double kSiegmundOffset = 1.166;  // Siegmund (1985): b = h + 1.166
constexpr double kMaxThreshold = 1000.0;

// Phi(hi) - Phi(lo) for lo <= hi, from whichever tail keeps the digits.
double NormalMass(double lo, double hi) {
  if (lo > 0.0) return 0.5 * (std::erfc(lo * kSqrtHalf) - std::erfc(hi * kSqrtHalf));
  return 0.5 * (std::erfc(-hi * kSqrtHalf) - std::erfc(-lo * kSqrtHalf));
}

double NormalCdf(double x) { return 0.5 * std::erfc(-x * kSqrtHalf); }

// States for the Markov chain at threshold h: width 2h/(2m - 1) <= 0.05 up to
// h = 15, bounded so that one solve stays below about 50 ms.
int MarkovStatesFor(double h) {
  const double m = std::ceil(20.0 * h);
  return static_cast<int>(std::clamp(m, 200.0, 600.0));
}

// The chain's ARL with the states chosen for h, extrapolated (Richardson 1911).
double RefinedMarkovArl(double h, double k, double mu) {
  return CusumArlMarkovRichardson(h, k, mu, MarkovStatesFor(h));
}

}  // namespace

double CusumArlSiegmund(double h, double k, double mu) {
  if (!std::isfinite(h) || !std::isfinite(k) || !std::isfinite(mu) || h < 0.0) return kNaN;
  const double d = mu - k;
  const double b = h + kSiegmundOffset;
  const double x = -2.0 * d * b;
  // ARL = (e^x - 1 - x) / (2 d^2) = 2 b^2 (e^x - 1 - x) / x^2; the last factor
  // by its series near x = 0, where the closed form cancels.
  double ratio;
  if (std::fabs(x) < 1e-3) {
    ratio = 0.5 + x * (1.0 / 6.0 + x * (1.0 / 24.0 + x * (1.0 / 120.0)));
  } else {
    ratio = (std::expm1(x) - x) / (x * x);
  }
  return 2.0 * b * b * ratio;
}

double CusumArlMarkov(double h, double k, double mu, int states) {
  if (!std::isfinite(h) || !std::isfinite(k) || !std::isfinite(mu) || h < 0.0 || states < 2)
    return kNaN;
  const int m = states;
  const double w = 2.0 * h / (2.0 * m - 1.0);
  const double a = k - mu;
  // R[i][j] for j >= 1 depends on j - i only: g[d + m - 1], d = j - i.
  std::vector<double> g(static_cast<size_t>(2 * m - 1));
  for (int d = -(m - 1); d <= m - 1; ++d)
    g[static_cast<size_t>(d + m - 1)] = NormalMass((d - 0.5) * w + a, (d + 0.5) * w + a);
  Eigen::MatrixXd system(m, m);
  for (int i = 0; i < m; ++i) {
    system(i, 0) = -NormalCdf(0.5 * w - i * w + a);
    for (int j = 1; j < m; ++j) system(i, j) = -g[static_cast<size_t>(j - i + m - 1)];
    system(i, i) += 1.0;
  }
  const Eigen::VectorXd ones = Eigen::VectorXd::Ones(m);
  const Eigen::VectorXd arl = system.partialPivLu().solve(ones);
  const double l0 = arl(0);
  if (!std::isfinite(l0) || !(l0 > 0.0)) return kInf;  // alarm out of reach in double
  return std::max(l0, 1.0);  // a run is at least one sample; trims round-off at h = 0
}

double CusumArlMarkovRichardson(double h, double k, double mu, int states) {
  if (states < 4) return kNaN;
  const int coarse = states / 2;
  const double fine_arl = CusumArlMarkov(h, k, mu, states);
  const double coarse_arl = CusumArlMarkov(h, k, mu, coarse);
  if (!std::isfinite(fine_arl) || !std::isfinite(coarse_arl) || h == 0.0) return fine_arl;
  // Widths 2h/(2m - 1): their ratio is a little above 2.
  const double r = (2.0 * states - 1.0) / (2.0 * coarse - 1.0);
  return fine_arl + (fine_arl - coarse_arl) / (r * r - 1.0);
}

double CusumArlTwoSided(double arl_upper, double arl_lower) {
  if (!(arl_upper > 0.0) || !(arl_lower > 0.0)) return kNaN;
  return 1.0 / (1.0 / arl_upper + 1.0 / arl_lower);
}

double CusumThresholdForArl(double arl0, double k, bool markov) {
  if (!std::isfinite(arl0) || !std::isfinite(k) || !(arl0 > 1.0)) return kNaN;
  const double target = std::log(arl0);

  // Siegmund's h, by bisection (cheap): the starting point either way.
  auto siegmund = [&](double h) { return std::log(CusumArlSiegmund(h, k, 0.0)) - target; };
  double guess = 0.0;
  if (siegmund(0.0) < 0.0) {
    double lo = 0.0, hi = 1.0;
    while (siegmund(hi) < 0.0) {
      lo = hi;
      hi *= 2.0;
      if (hi > 4.0 * kMaxThreshold) return kNaN;
    }
    for (int it = 0; it < 200 && hi - lo > 1e-12 * (1.0 + hi); ++it) {
      const double mid = 0.5 * (lo + hi);
      (siegmund(mid) < 0.0 ? lo : hi) = mid;
    }
    guess = 0.5 * (lo + hi);
  }
  if (!markov) {
    if (guess > kMaxThreshold) return kNaN;
    return guess;
  }

  const int states = MarkovStatesFor(guess);
  auto f = [&](double h) {
    return std::log(CusumArlMarkovRichardson(h, k, 0.0, states)) - target;
  };
  // At h = 0 the run length is geometric, ARL = 1 / (1 - Phi(k)) (the chain
  // is exact there).
  const double f0 = -std::log(0.5 * std::erfc(k * kSqrtHalf)) - target;
  if (!(f0 < 0.0)) return 0.0;  // even h = 0 alarms less often than the budget asks

  // Bracket [lo, hi] with f(lo) < 0 <= f(hi), from the guess outwards: the
  // Siegmund h is usually within a fraction of a percent.
  const double x0 = std::max(guess, 1e-3);
  const double fx0 = f(x0);
  if (std::isnan(fx0)) return kNaN;
  double step = 0.02 * (1.0 + x0);
  double lo, flo, hi, fhi;
  if (fx0 < 0.0) {
    lo = x0;
    flo = fx0;
    hi = x0 + step;
    fhi = f(hi);
    while (fhi < 0.0) {
      lo = hi;
      flo = fhi;
      step *= 2.0;
      hi += step;
      if (hi > kMaxThreshold) return kNaN;
      fhi = f(hi);
    }
  } else {
    hi = x0;
    fhi = fx0;
    lo = x0 - step;
    for (;;) {
      if (lo <= 0.0) {
        lo = 0.0;
        flo = f0;
        break;
      }
      flo = f(lo);
      if (flo < 0.0) break;
      hi = lo;
      fhi = flo;
      step *= 2.0;
      lo -= step;
    }
  }
  if (hi > kMaxThreshold) return kNaN;

  // Illinois regula falsi (Dowell & Jarratt 1971); bisection if a step
  // leaves the bracket (e.g. an ARL beyond double range at hi).
  int side = 0;  // +1: hi replaced last, -1: lo replaced last
  double x = hi;
  for (int it = 0; it < 200; ++it) {
    x = hi - fhi * (hi - lo) / (fhi - flo);
    if (!(x > lo && x < hi)) x = 0.5 * (lo + hi);
    const double fx = f(x);
    if (std::fabs(fx) <= 1e-10 || hi - lo <= 1e-9 * (1.0 + x)) break;
    if (fx >= 0.0) {
      hi = x;
      fhi = fx;
      if (side == +1) flo *= 0.5;
      side = +1;
    } else {
      lo = x;
      flo = fx;
      if (side == -1) fhi *= 0.5;
      side = -1;
    }
  }
  return x;
}

double CusumDelayBound(double arl0, double delta) {
  if (!std::isfinite(arl0) || !std::isfinite(delta) || !(arl0 > 1.0) || delta == 0.0) return kNaN;
  return 2.0 * std::log(arl0) / (delta * delta);
}

double CusumArlAutocorrelatedInflation(double phi) {
  if (!(phi > -1.0 && phi < 1.0)) return kNaN;
  return (1.0 + phi) / (1.0 - phi);
}

double ArlFromBudget(double false_alarm_interval_s, double sample_interval_s,
                     int detectors_in_bank) {
  if (!std::isfinite(false_alarm_interval_s) || !std::isfinite(sample_interval_s) ||
      !(false_alarm_interval_s > 0.0) || !(sample_interval_s > 0.0) || detectors_in_bank < 1)
    return kNaN;
  return detectors_in_bank * false_alarm_interval_s / sample_interval_s;
}

// ---------------------------------------------------------------------------

bool CusumDesignOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) {
    if (why) *why = m;
    return false;
  };
  if (!(target_shift_sigma > 0.0) || !std::isfinite(target_shift_sigma))
    return fail("cusum design: target_shift_sigma must be positive and finite");
  if (!(false_alarm_interval_s > 0.0) || !std::isfinite(false_alarm_interval_s))
    return fail("cusum design: false_alarm_interval_s must be positive and finite");
  if (!(sample_interval_s > 0.0) || !std::isfinite(sample_interval_s))
    return fail("cusum design: sample_interval_s must be positive and finite");
  if (detectors_in_bank < 1 || detectors_in_bank > 1000)
    return fail("cusum design: detectors_in_bank must be between 1 and 1000");
  if (!(ar1_phi > -1.0 && ar1_phi < 1.0)) return fail("cusum design: ar1_phi must be in (-1, 1)");
  if (!(ArlFromBudget(false_alarm_interval_s, sample_interval_s, detectors_in_bank) > 2.0))
    return fail("cusum design: the budget allows a false alarm every other sample or more often");
  return true;
}

CusumDesign DesignCusum(const CusumDesignOptions& options) {
  CusumDesign d;
  if (!options.IsValid(&d.reason)) return d;
  d.sigma_inflation = CusumArlAutocorrelatedInflation(options.ar1_phi);
  d.shift_z = options.target_shift_sigma / std::sqrt(d.sigma_inflation);
  d.k = 0.5 * d.shift_z;
  d.arl0_samples = ArlFromBudget(options.false_alarm_interval_s, options.sample_interval_s,
                                 options.detectors_in_bank);
  d.h = CusumThresholdForArl(d.arl0_samples, d.k, options.markov);
  if (!std::isfinite(d.h)) {
    d.reason = "cusum design: no threshold up to 1000 reaches the budget's ARL";
    return d;
  }
  d.arl1_samples = options.markov ? RefinedMarkovArl(d.h, d.k, d.shift_z)
                                  : CusumArlSiegmund(d.h, d.k, d.shift_z);
  d.delay_bound_samples = CusumDelayBound(d.arl0_samples, d.shift_z);
  d.delay_s = d.arl1_samples * options.sample_interval_s;
  d.ok = true;
  return d;
}

std::string CusumDesign::ToString() const {
  if (!ok) return "CusumDesign{invalid: " + reason + "}";
  char buf[256];
  std::snprintf(buf, sizeof buf,
                "CusumDesign{k=%.4g h=%.4g ARL0=%.4g ARL1=%.4g samples (%.4g s) "
                "Lorden=%.4g inflation=%.4g}",
                k, h, arl0_samples, arl1_samples, delay_s, delay_bound_samples, sigma_inflation);
  return buf;
}

std::string CusumDesign::Report() const {
  if (!ok) return "CUSUM design: invalid: " + reason + "\n";
  char buf[768];
  std::snprintf(buf, sizeof buf,
                "CUSUM design (one-sided, Page 1954)\n"
                "  sigma inflation (AR(1))   %.6g  (standardise by sigma * %.6g)\n"
                "  target shift              %.6g sigma of z\n"
                "  reference value k         %.6g\n"
                "  decision interval h       %.6g\n"
                "  in-control ARL            %.6g samples\n"
                "  ARL at the target shift   %.6g samples = %.6g s\n"
                "  Lorden asymptote          %.6g samples\n",
                sigma_inflation, std::sqrt(sigma_inflation), shift_z, k, h, arl0_samples,
                arl1_samples, delay_s, delay_bound_samples);
  return buf;
}

// ---------------------------------------------------------------------------

SprtBounds WaldBounds(double alpha, double beta) {
  SprtBounds b;
  if (!(alpha > 0.0) || !(beta > 0.0) || !(alpha + beta < 1.0)) {
    b.lower = b.upper = kNaN;
    return b;
  }
  b.upper = std::log1p(-beta) - std::log(alpha);
  b.lower = std::log(beta) - std::log1p(-alpha);
  return b;
}

double SprtLlrIncrement(double z, double delta) { return delta * z - 0.5 * delta * delta; }

double SprtOperatingCharacteristic(double alpha, double beta, double delta, double mu) {
  const SprtBounds bounds = WaldBounds(alpha, beta);
  if (std::isnan(bounds.upper) || !std::isfinite(delta) || delta == 0.0 || !std::isfinite(mu))
    return kNaN;
  const double a = bounds.upper, b = bounds.lower;
  const double h = 1.0 - 2.0 * mu / delta;
  if (std::fabs(h) * std::max(a, -b) < 1e-9) return a / (a - b);
  // Scaled so that every exponential is at most 1.
  if (h > 0.0) return std::expm1(-h * a) / std::expm1(h * (b - a));
  return (std::expm1(h * (a - b)) - std::expm1(-h * b)) / std::expm1(h * (a - b));
}

double SprtAverageSampleNumber(double alpha, double beta, double delta, double mu) {
  const SprtBounds bounds = WaldBounds(alpha, beta);
  if (std::isnan(bounds.upper) || !std::isfinite(delta) || delta == 0.0 || !std::isfinite(mu))
    return kNaN;
  const double a = bounds.upper, b = bounds.lower;
  const double h = 1.0 - 2.0 * mu / delta;
  if (std::fabs(h) * std::max(a, -b) < 1e-6) return -a * b / (delta * delta);
  const double oc = SprtOperatingCharacteristic(alpha, beta, delta, mu);
  const double drift = delta * (mu - 0.5 * delta);
  return (oc * b + (1.0 - oc) * a) / drift;
}

}  // namespace holdfast
