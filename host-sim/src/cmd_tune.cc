// `holdfast tune`: learn each segment's residual statistics from leak-free
// data, state what they mean (false alarms at the budget, the smallest leak
// found within a given time), and write them to a tuning file that seeds the
// decision stage (tuning_file.h; config/TUNING.md).
//
// The readings go through a Monitor tick by tick, as in `holdfast balance`.
// Each segment's per-tick decision input is summed into blocks of block_s
// exactly as the decision stage forms them (decision.h): a block starts
// after the previous one, and a tick without a balance (status unavailable,
// or the first tick after one, which only re-baselines the inventory) drops
// the block in progress. The input is the one the detectors see
// (DecisionInput, tuning_file.h): the change of the low-pass filtered
// cumulative imbalance sum(SegmentTick::residual_kg_s * dt). The plain
// residual is blocked beside it and reported for comparison.
//
// The block means are then estimated robustly: bias by the median, sigma by
// 1.4826 * MAD (the normal-consistent median absolute deviation, Hampel 1974,
// J. Amer. Statist. Assoc. 69, from memory; the constant is 1/Phi^-1(3/4)),
// phi by the lag-one autocorrelation of consecutive blocks with deviations
// clipped at 3 sigma (as the decision stage clips its learning).
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <memory>
#include <string>
#include <sys/stat.h>
#include <vector>

#include "cli_commands.h"
#include "holdfast/arl.h"
#include "holdfast/decision.h"
#include "holdfast/monitor.h"
#include "readings_csv.h"
#include "site_file.h"
#include "tuning_file.h"

namespace holdfast::cli {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// Normal-consistent MAD: sigma = kMadToSigma * median|x - median| (1/Phi^-1(0.75)).
constexpr double kMadToSigma = 1.482602218505602;
// Block deviations are clipped at this many robust sigmas for phi.
constexpr double kPhiClipSigmas = 3.0;
constexpr double kPhiLimit = 0.9;
// Blocks are used from this many filter time constants after the decision
// input's filter (re)starts (at the first tick and after every gap): exp(-6)
// leaves 0.25 % of the restart's lag.
constexpr double kFilterSettleConstants = 6.0;
// Fewer blocks than this and a segment is not tuned.
constexpr int64_t kMinBlocks = 30;
// Fewer blocks than a day's worth and the estimates are called rough.
constexpr double kRoughBelow_s = 86400.0;
// A step between the halves of the data beyond this many standard errors is
// reported (two-sided, 0.27 % of leak-free runs at 3 if the errors are normal).
constexpr double kDriftWarnZ = 3.0;
// Detection times the minimum detectable leak is stated for.
constexpr double kDetectionTimes_s[] = {600.0, 3600.0, 6.0 * 3600.0, 24.0 * 3600.0};

struct TuneArgs {
  std::string config, data, out = "tuning.json", until;
  double block_s = 60.0;
  double budget_days = 90.0;
};

struct Block {
  double start_s = 0.0, end_s = 0.0;
  double r_kg_s = 0.0;      // mean imbalance the decision sees (filtered cumulative imbalance)
  double inv_kg_s = 0.0;    // mean inventory rate (SegmentTick::inventory_rate_kg_s)
  double raw_r_kg_s = 0.0;  // mean plain balance residual (SegmentTick::residual_kg_s)
};

// Forms one segment's blocks from its ticks, as SegmentDecision::Step does
// with the input Monitor::TickSegment gives it (DecisionInput).
class BlockBuilder {
 public:
  BlockBuilder(double block_s, double filter_s) : block_s_(block_s), filter_s_(filter_s), input_(filter_s) {}

  void Tick(const SegmentTick& t, double dt) {
    if (t.status == SegmentStatus::kUnavailable) unavailable_s_ += dt;
    input_.Tick(t, dt);
    if (!input_.valid()) {
      if (dt_ > 0.0) ++dropped_;  // a partial block across a gap is dropped
      kg_ = raw_kg_ = dt_ = inv_kg_ = 0.0;
      start_s_ = t.time_s;
      filter_start_s_ = t.time_s;
      return;
    }
    kg_ += input_.imbalance_kg();
    raw_kg_ += t.residual_kg_s * dt;
    inv_kg_ += input_.inventory_rate_kg_s() * dt;
    dt_ += dt;
    if (dt_ >= block_s_ - 1e-9) {
      // The filtered imbalance restarts flat and reaches the imbalance's
      // slope over a few time constants (exp(-t / filter_s)): blocks in the
      // first kFilterSettleConstants of them are not in-control behaviour.
      if (start_s_ < filter_start_s_ + kFilterSettleConstants * filter_s_) ++settling_;
      else blocks_.push_back(Block{start_s_, t.time_s, kg_ / dt_, inv_kg_ / dt_, raw_kg_ / dt_});
      kg_ = raw_kg_ = dt_ = inv_kg_ = 0.0;
      start_s_ = t.time_s;
    }
  }

  const std::vector<Block>& blocks() const { return blocks_; }
  int64_t dropped() const { return dropped_; }
  int64_t settling() const { return settling_; }
  double unavailable_s() const { return unavailable_s_; }

 private:
  double block_s_, filter_s_;
  DecisionInput input_;
  double filter_start_s_ = 0.0;
  double kg_ = 0.0, raw_kg_ = 0.0, dt_ = 0.0, inv_kg_ = 0.0, start_s_ = 0.0;
  std::vector<Block> blocks_;
  int64_t dropped_ = 0, settling_ = 0;
  double unavailable_s_ = 0.0;
};

double Median(std::vector<double> v) {
  if (v.empty()) return kNaN;
  const size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid), v.end());
  const double upper = v[mid];
  if (v.size() % 2 == 1) return upper;
  const double lower = *std::max_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid));
  return 0.5 * (lower + upper);
}

double RobustSigma(const std::vector<double>& v, double median) {
  std::vector<double> dev(v.size());
  for (size_t i = 0; i < v.size(); ++i) dev[i] = std::fabs(v[i] - median);
  return kMadToSigma * Median(dev);
}

void MeanSd(const std::vector<double>& v, double* mean, double* sd) {
  double m = 0.0;
  for (double x : v) m += x;
  m /= static_cast<double>(v.size());
  double ss = 0.0;
  for (double x : v) ss += (x - m) * (x - m);
  *mean = m;
  *sd = v.size() > 1 ? std::sqrt(ss / static_cast<double>(v.size() - 1)) : 0.0;
}

// ---------------------------------------------------------------------------
// Run lengths. Thresholds come from CusumThresholdForArl (Markov chain,
// Brook & Evans 1972); run lengths back from the same chain extrapolated in
// its width (CusumArlMarkovRichardson) with the state count the threshold
// solver uses, so that the back-check is not short by the chain's own error.
// ---------------------------------------------------------------------------

int StatesFor(double h) { return std::clamp(static_cast<int>(std::ceil(20.0 * h)), 200, 600); }

double UpperTail(double x) { return 0.5 * std::erfc(x / std::sqrt(2.0)); }

// Zero-state ARL (samples) of the one-sided CUSUM at shift mu.
double Arl(double h, double k, double mu) {
  if (!std::isfinite(h)) return kNaN;
  // h = 0: alarm at the first z > k, a geometric run length.
  if (h <= 0.0) return 1.0 / UpperTail(k - mu);
  return CusumArlMarkovRichardson(h, k, mu, StatesFor(h));
}

// Expected delay (samples) of a CUSUM tuned to shift delta (k = delta/2) with
// the per-detector in-control ARL arl0. markov = false: Siegmund throughout
// (cheap, for bracketing). markov = true: the threshold as the monitor's
// table sets its nodes (Siegmund where h > 25, where it is within a few
// 1e-4 of the chain, else the chain), and the delay from the chain at the
// shift; out of control the plain chain is within about 0.1 %.
double TunedDelay(double arl0, double delta, bool markov) {
  const double k = 0.5 * delta;
  double h = CusumThresholdForArl(arl0, k, false);
  if (markov && !(h > 25.0)) h = CusumThresholdForArl(arl0, k, true);
  if (!std::isfinite(h)) return kNaN;
  if (!markov) return CusumArlSiegmund(h, k, delta);
  if (h <= 0.0) return 1.0 / UpperTail(k - delta);
  return CusumArlMarkov(h, k, delta, StatesFor(h));
}

// The smallest shift (sigma units) whose tuned-CUSUM delay is at most
// `samples`; NaN when none up to 30 sigma is. The delay falls with the shift:
// bisection in log(shift) on Siegmund's approximation first (cheap), then
// on the Markov chain inside a bracket around that, to 0.1 %.
double MinimumShift(double arl0, double samples, double* delay_samples) {
  constexpr double kLo = 1e-3, kHi = 30.0;
  auto ok = [&](double d, bool markov) {
    const double delay = TunedDelay(arl0, d, markov);
    return std::isfinite(delay) && delay <= samples;
  };
  if (!ok(kHi, true)) return kNaN;
  double lo = kLo, hi = kHi;
  if (ok(lo, false)) hi = lo;
  while (hi / lo > 1.001) {
    const double mid = std::sqrt(lo * hi);
    if (ok(mid, false)) hi = mid; else lo = mid;
  }
  // Bracket the chain's answer around Siegmund's.
  lo = std::max(kLo, hi / 1.05);
  hi = std::min(kHi, hi * 1.05);
  while (lo > kLo && ok(lo, true)) lo = std::max(kLo, lo / 1.05);
  while (hi < kHi && !ok(hi, true)) hi = std::min(kHi, hi * 1.05);
  if (ok(lo, true)) hi = lo;
  while (hi / lo > 1.001) {
    const double mid = std::sqrt(lo * hi);
    if (ok(mid, true)) hi = mid; else lo = mid;
  }
  *delay_samples = TunedDelay(arl0, hi, true);
  return hi;
}

struct ShiftAtTime {
  double detection_s = 0.0;
  double shift_sigma = kNaN;
  double delay_s = kNaN;
};

// ---------------------------------------------------------------------------
// Estimates and the figures derived from them.
// ---------------------------------------------------------------------------

struct Stats {
  double median = 0.0, sigma = 0.0;  // median and 1.4826 MAD (sd when the MAD is 0)
  double mean = 0.0, sd = 0.0;
  double phi = 0.0;                  // lag one, clipped deviations, consecutive blocks only
  int64_t pairs = 0;
};

Stats BlockStats(const std::vector<double>& r, const std::vector<Block>& blocks) {
  Stats st;
  st.median = Median(r);
  st.sigma = RobustSigma(r, st.median);
  MeanSd(r, &st.mean, &st.sd);
  if (!(st.sigma > 0.0)) st.sigma = st.sd;  // more than half the blocks identical
  if (!(st.sigma > 0.0)) return st;
  const double lim = kPhiClipSigmas * st.sigma;
  auto dev = [&](size_t i) { return std::clamp(r[i] - st.median, -lim, lim); };
  double c0 = 0.0, c1 = 0.0;
  for (size_t i = 0; i < r.size(); ++i) {
    c0 += dev(i) * dev(i);
    if (i > 0 && blocks[i].start_s == blocks[i - 1].end_s) {
      c1 += dev(i) * dev(i - 1);
      ++st.pairs;
    }
  }
  c0 /= static_cast<double>(r.size());
  if (st.pairs > 0 && c0 > 0.0)
    st.phi = std::clamp((c1 / static_cast<double>(st.pairs)) / c0, -kPhiLimit, kPhiLimit);
  return st;
}

struct Extra {  // reported, not stored
  Stats raw;                     // the plain balance residual, for comparison
  double inflation = 1.0;
  double unavailable_s = 0.0;
  int64_t settling_blocks = 0;   // left out while the decision input's filter settled
  int64_t transient_blocks = 0;
  double drift_z = 0.0;          // mean of the second half against the first, in standard errors
  double drift_kg_s = 0.0;
};

bool Estimate(const SegmentSpec& spec, const BlockBuilder& b, double block_s, SegmentTuning* s, Extra* x,
              std::string* why) {
  const std::vector<Block>& blocks = b.blocks();
  s->segment = spec.id;
  s->block_s = block_s;
  s->blocks = static_cast<int64_t>(blocks.size());
  s->blocks_dropped = b.dropped();
  s->nominal_flow_kg_s = std::isfinite(spec.nominal_flow_kg_s) && spec.nominal_flow_kg_s > 0.0
                             ? spec.nominal_flow_kg_s : kNaN;
  x->unavailable_s = b.unavailable_s();
  x->settling_blocks = b.settling();
  if (s->blocks < kMinBlocks) {
    *why = "only " + std::to_string(s->blocks) + " complete block(s) of " + std::to_string(std::lround(block_s)) +
           " s with a balance; at least " + std::to_string(kMinBlocks) + " are needed";
    return false;
  }
  s->first_time_s = blocks.front().start_s;
  s->last_time_s = blocks.back().end_s;
  std::vector<double> r(blocks.size()), inv(blocks.size()), raw(blocks.size());
  for (size_t i = 0; i < blocks.size(); ++i) {
    r[i] = blocks[i].r_kg_s;
    inv[i] = blocks[i].inv_kg_s;
    raw[i] = blocks[i].raw_r_kg_s;
  }
  const Stats st = BlockStats(r, blocks);
  if (!(st.sigma > 0.0)) {
    *why = "the block residual does not vary at all (sigma 0): are the readings frozen?";
    return false;
  }
  s->bias_kg_s = st.median;
  s->bias_mean_kg_s = st.mean;
  s->sigma_kg_s = st.sigma;
  s->sigma_sd_kg_s = st.sd;
  s->phi = st.phi;
  s->block_pairs = st.pairs;
  x->inflation = CusumArlAutocorrelatedInflation(s->phi);
  s->sigma_eff_kg_s = s->sigma_kg_s * std::sqrt(x->inflation);
  x->raw = BlockStats(raw, blocks);

  // Transient signature: the spread of the block inventory rate.
  s->inventory_rate_kg_s = Median(inv);
  s->inventory_rate_sigma_kg_s = RobustSigma(inv, s->inventory_rate_kg_s);
  for (double v : inv)
    if (std::fabs(v - s->inventory_rate_kg_s) > kTransientSigmas * s->inventory_rate_sigma_kg_s) ++x->transient_blocks;

  // A leak in the "leak-free" data shows as a step: compare the means of the
  // two halves (deviations from each half's median, clipped at 3 sigma
  // against transients). The noise is measured within the halves, so that
  // the step itself does not inflate it: the standard error of a mean of n
  // blocks is sigma_w sqrt((1 + phi_w)/(1 - phi_w)) / sqrt(n) (AR(1)
  // long-run variance; arl.h, CusumArlAutocorrelatedInflation).
  const size_t half = r.size() / 2;
  const double med1 = Median(std::vector<double>(r.begin(), r.begin() + static_cast<std::ptrdiff_t>(half)));
  const double med2 = Median(std::vector<double>(r.begin() + static_cast<std::ptrdiff_t>(half), r.end()));
  std::vector<double> within(r.size());
  for (size_t i = 0; i < r.size(); ++i) within[i] = r[i] - (i < half ? med1 : med2);
  const Stats w = BlockStats(within, blocks);
  const double lim = kPhiClipSigmas * w.sigma;
  double sum1 = 0.0, sum2 = 0.0;
  for (size_t i = 0; i < r.size(); ++i) (i < half ? sum1 : sum2) += std::clamp(within[i], -lim, lim);
  const double n1 = static_cast<double>(half), n2 = static_cast<double>(r.size() - half);
  const double se = w.sigma * std::sqrt(CusumArlAutocorrelatedInflation(w.phi) * (1.0 / n1 + 1.0 / n2));
  x->drift_kg_s = (med2 + sum2 / n2) - (med1 + sum1 / n1);
  x->drift_z = se > 0.0 ? x->drift_kg_s / se : 0.0;
  return true;
}

void Derive(const DecisionOptions& d, const std::vector<ShiftAtTime>& shifts, SegmentTuning* s) {
  s->arl0_blocks = ArlFromBudget(d.false_alarm_interval_s, d.block_s, static_cast<int>(d.target_fractions.size()));
  s->detectors.clear();
  if (std::isfinite(s->nominal_flow_kg_s)) {
    double rate_per_s = 0.0;
    for (double f : d.target_fractions) {
      TuningDetector det;
      det.target_fraction = f;
      det.target_kg_s = f * s->nominal_flow_kg_s;
      det.k = 0.5 * det.target_kg_s / s->sigma_eff_kg_s;
      det.h = CusumThresholdForArl(s->arl0_blocks, det.k, true);
      det.arl0_blocks = Arl(det.h, det.k, 0.0);
      rate_per_s += 1.0 / (det.arl0_blocks * d.block_s);
      s->detectors.push_back(det);
    }
    // Union bound: the bank's false-alarm rate is at most the sum of its
    // detectors' rates (arl.h, ArlFromBudget).
    s->bank_false_alarm_interval_s = 1.0 / rate_per_s;
  }
  s->detection.clear();
  for (const ShiftAtTime& sh : shifts) {
    TuningDetection t;
    t.detection_s = sh.detection_s;
    t.shift_sigma = sh.shift_sigma;
    t.delay_s = sh.delay_s;
    t.leak_kg_s = sh.shift_sigma * s->sigma_eff_kg_s;
    t.leak_fraction = t.leak_kg_s / s->nominal_flow_kg_s;  // NaN without a nominal flow
    s->detection.push_back(t);
  }
}

// ---------------------------------------------------------------------------
// The report
// ---------------------------------------------------------------------------

std::string Duration(double s) {
  char buf[32];
  if (!std::isfinite(s)) return "-";
  if (s < 120.0) std::snprintf(buf, sizeof buf, "%.0f s", s);
  else if (s < 7200.0) std::snprintf(buf, sizeof buf, "%.1f min", s / 60.0);
  else if (s < 3.0 * 86400.0) std::snprintf(buf, sizeof buf, "%.1f h", s / 3600.0);
  else std::snprintf(buf, sizeof buf, "%.1f days", s / 86400.0);
  return buf;
}

void Report(const SegmentSpec& spec, const SegmentTuning& s, const Extra& x, double budget_s) {
  std::printf("\nSegment %s (%s)\n", spec.id.c_str(), spec.name.c_str());
  std::printf("  data          %s .. %s: %lld blocks of %g s used; %lld left out while the filter\n"
              "                settled, %lld dropped over gaps (unavailable %s)\n",
              FormatIsoUtc(s.first_time_s, 0).c_str(), FormatIsoUtc(s.last_time_s, 0).c_str(),
              static_cast<long long>(s.blocks), s.block_s, static_cast<long long>(x.settling_blocks),
              static_cast<long long>(s.blocks_dropped), Duration(x.unavailable_s).c_str());
  // Standard error of a median, 1.2533 sigma / sqrt(n) for normal data
  // (sqrt(pi/2); asymptotic), with the autocorrelated sigma.
  const double se = 1.2533 * s.sigma_eff_kg_s / std::sqrt(static_cast<double>(s.blocks));
  std::printf("  bias          %+.4f kg/s (median, standard error %.4f)    mean %+.4f kg/s\n", s.bias_kg_s, se,
              s.bias_mean_kg_s);
  std::printf("  sigma         %.4f kg/s (1.4826 MAD)  plain sd %.4f kg/s\n", s.sigma_kg_s, s.sigma_sd_kg_s);
  std::printf("  phi           %.3f (lag one, %lld pairs); sigma x %.3f -> %.4f kg/s for the detectors\n", s.phi,
              static_cast<long long>(s.block_pairs), std::sqrt(x.inflation), s.sigma_eff_kg_s);
  std::printf("  unfiltered    plain balance residual: bias %+.4f kg/s, sigma %.4f kg/s, phi %.3f\n"
              "                (for comparison; the detectors see the filtered imbalance above)\n",
              x.raw.median, x.raw.sigma, x.raw.phi);
  std::printf("  transients    block inventory rate %+.3f kg/s, spread %.3f kg/s (1.4826 MAD); "
              "%lld block(s) beyond %g spreads\n",
              s.inventory_rate_kg_s, s.inventory_rate_sigma_kg_s, static_cast<long long>(x.transient_blocks),
              kTransientSigmas);
  std::printf("  step check    second half against first: %+.4f kg/s (%.1f standard errors; warned beyond %g)\n",
              x.drift_kg_s, x.drift_z, kDriftWarnZ);
  if (std::isfinite(s.nominal_flow_kg_s))
    std::printf("  nominal flow  %.2f kg/s\n", s.nominal_flow_kg_s);

  std::printf("  false alarms  per-detector in-control ARL %.0f blocks (%s) from the budget\n", s.arl0_blocks,
              Duration(s.arl0_blocks * s.block_s).c_str());
  if (s.detectors.empty()) {
    std::printf("                no nominal flow: the segment has no decision stage, no bank to check\n");
  } else {
    std::printf("      target kg/s   %% nominal        k         h   ARL0 back (days)\n");
    for (const TuningDetector& d : s.detectors) {
      // h = 0 (alarm on one block beyond k) can leave a detector far inside
      // its share of the budget: its ARL is then astronomically long.
      const double days = d.arl0_blocks * s.block_s / 86400.0;
      char arl[32];
      if (std::isfinite(days) && days < 1e6) std::snprintf(arl, sizeof arl, "%.2f", days);
      else std::snprintf(arl, sizeof arl, "> 1e6");
      std::printf("      %11.4f   %9.2f  %7.4f  %8.3f   %14s\n", d.target_kg_s, 100.0 * d.target_fraction, d.k, d.h,
                  arl);
    }
    const bool met = s.bank_false_alarm_interval_s >= budget_s * (1.0 - 1e-3);
    std::printf("      bank: at most one false alarm per %.1f days (union bound); budget %.1f days: %s\n",
                s.bank_false_alarm_interval_s / 86400.0, budget_s / 86400.0, met ? "met" : "NOT met");
  }

  std::printf("  minimum detectable step leak (a CUSUM tuned to it, k = shift/2, sigma %.4f kg/s)\n",
              s.sigma_eff_kg_s);
  std::printf("      detected within     leak kg/s   %% nominal   shift (sigma)   expected delay\n");
  for (const TuningDetection& d : s.detection) {
    if (!std::isfinite(d.leak_kg_s)) {
      std::printf("      %15s     %9s   %9s   %13s   (shorter than a block)\n", Duration(d.detection_s).c_str(), "-",
                  "-", "-");
      continue;
    }
    char frac[32] = "-";
    if (std::isfinite(d.leak_fraction)) std::snprintf(frac, sizeof frac, "%.3f", 100.0 * d.leak_fraction);
    std::printf("      %15s     %9.4f   %9s   %13.3f   %s\n", Duration(d.detection_s).c_str(), d.leak_kg_s, frac,
                d.shift_sigma, Duration(d.delay_s).c_str());
  }

  if (static_cast<double>(s.blocks) * s.block_s < kRoughBelow_s)
    std::printf("  note: %s of blocks only; the estimates are rough. Tune on days to weeks of leak-free\n"
                "        operation that include the line's usual operating changes.\n",
                Duration(static_cast<double>(s.blocks) * s.block_s).c_str());
  if (s.sigma_sd_kg_s > 1.5 * s.sigma_kg_s)
    std::printf("  note: the plain sd is %.1f times the robust sigma: heavy tails (outliers or transients) in the\n"
                "        data; the detectors use the robust sigma and will see those as evidence.\n",
                s.sigma_sd_kg_s / s.sigma_kg_s);
  if (std::fabs(x.drift_z) > kDriftWarnZ)
    std::printf("  WARNING: the mean residual moves by %+.4f kg/s (%.1f standard errors) between the first and\n"
                "        second half of the data. A leak (or a change of meter bias) in the data would do that;\n"
                "        the tuning data must be leak-free.\n",
                x.drift_kg_s, x.drift_z);
}

bool IsDirectory(const std::string& path) {
  struct stat st;
  return ::stat(path.c_str(), &st) == 0 && S_ISDIR(st.st_mode);
}

int RunTune(const TuneArgs& a) {
  Site site;
  std::vector<ConfigProblem> problems;
  if (!LoadSiteFile(a.config, &site, &problems)) {
    for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
    std::fprintf(stderr, "%zu problem(s) in %s; run 'holdfast check-config %s'\n", problems.size(),
                 a.config.c_str(), a.config.c_str());
    return 2;
  }
  DecisionOptions dopt;
  dopt.block_s = a.block_s;
  dopt.false_alarm_interval_s = a.budget_days * 86400.0;
  std::string why;
  if (!(a.block_s >= site.tick_s)) {
    std::fprintf(stderr, "--block-s: %g s is shorter than the tick of %s (%g s)\n", a.block_s, a.config.c_str(),
                 site.tick_s);
    return 2;
  }
  if (!dopt.IsValid(&why)) {
    std::fprintf(stderr, "--block-s %g --budget-days %g: %s\n", a.block_s, a.budget_days, why.c_str());
    return 2;
  }
  double until = kNaN;
  if (!a.until.empty() && !ParseTime(a.until, &until)) {
    std::fprintf(stderr, "--until: cannot read '%s' as a time; use ISO 8601 with a zone, e.g. "
                 "2026-03-14T08:00:00Z\n", a.until.c_str());
    return 2;
  }
  std::string out_path = a.out;
  if (IsDirectory(out_path)) out_path += (out_path.back() == '/' ? "" : "/") + std::string("tuning.json");

  Monitor monitor;
  Monitor::Options mopt;
  mopt.decision = dopt;
  if (!monitor.Init(site, mopt, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.config.c_str(), why.c_str());
    return 2;
  }
  ReadingsCsvReader reader;
  if (!reader.Open(a.data, site, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }

  std::vector<BlockBuilder> builders(site.segments.size(),
                                    BlockBuilder(a.block_s, mopt.decision_inventory_filter_s));
  const double tick = site.tick_s;
  double next_tick = 0.0, prev_tick = 0.0, last_time = 0.0;
  bool started = false, ticked = false;
  uint64_t ticks = 0;
  auto do_tick = [&](double t) {
    monitor.Advance(t);
    const double dt = ticked ? t - prev_tick : 0.0;
    for (int s = 0; s < monitor.segment_count(); ++s) builders[s].Tick(monitor.segment(s), dt);
    prev_tick = t;
    ticked = true;
    ++ticks;
  };
  Reading r;
  while (reader.Next(&r)) {
    if (std::isfinite(until) && r.time_s > until) break;
    if (!started) {
      next_tick = std::ceil(r.time_s / tick) * tick;
      started = true;
    }
    while (r.time_s > next_tick) {
      do_tick(next_tick);
      next_tick += tick;
    }
    monitor.Feed(r);
    if (r.time_s > last_time) last_time = r.time_s;
  }
  if (started) {
    while (next_tick <= last_time + 1e-9) {
      do_tick(next_tick);
      next_tick += tick;
    }
  }
  std::fprintf(stderr, "%s: %llu rows, %llu bad; %llu ticks; readings %s\n", reader.path().c_str(),
               static_cast<unsigned long long>(reader.rows()), static_cast<unsigned long long>(reader.bad_rows()),
               static_cast<unsigned long long>(ticks), monitor.counters().ToString().c_str());
  for (const auto& e : reader.errors())
    std::fprintf(stderr, "%s:%llu: %s\n", reader.path().c_str(), static_cast<unsigned long long>(e.line),
                 e.message.c_str());
  if (ticks == 0) {
    std::fprintf(stderr, "%s: no readings%s; nothing to tune\n", reader.path().c_str(),
                 std::isfinite(until) ? " up to --until" : "");
    return 2;
  }

  // Estimates first: without a tunable segment there is nothing to derive.
  std::vector<SegmentTuning> tuned(site.segments.size());
  std::vector<Extra> extra(site.segments.size());
  std::vector<std::string> not_tuned(site.segments.size());
  int skipped = 0;
  for (size_t i = 0; i < site.segments.size(); ++i) {
    if (!Estimate(site.segments[i], builders[i], dopt.block_s, &tuned[i], &extra[i], &not_tuned[i])) {
      std::fprintf(stderr, "%s: segment %s not tuned: %s\n", a.data.c_str(), site.segments[i].id.c_str(),
                   not_tuned[i].c_str());
      ++skipped;
    }
  }
  if (skipped == static_cast<int>(site.segments.size())) {
    std::fprintf(stderr, "%s: no segment could be tuned; no tuning file written\n", a.data.c_str());
    return 2;
  }

  // The tuned-CUSUM shift for each detection time depends only on the
  // per-detector ARL and the block length: the same for every segment.
  const double arl0 = ArlFromBudget(dopt.false_alarm_interval_s, dopt.block_s,
                                    static_cast<int>(dopt.target_fractions.size()));
  std::vector<ShiftAtTime> shifts;
  for (double t : kDetectionTimes_s) {
    ShiftAtTime s;
    s.detection_s = t;
    double delay = kNaN;
    s.shift_sigma = MinimumShift(arl0, t / dopt.block_s, &delay);
    s.delay_s = delay * dopt.block_s;
    shifts.push_back(s);
  }

  TuningFile file;
  file.site = site.name;
  file.data = a.data;
  file.until_s = until;
  file.false_alarm_interval_s = dopt.false_alarm_interval_s;
  file.detectors_in_bank = static_cast<int>(dopt.target_fractions.size());
  file.inventory_filter_s = mopt.decision_inventory_filter_s;

  std::printf("holdfast tune: %s, readings %s%s%s\n", site.name.c_str(), a.data.c_str(),
              std::isfinite(until) ? " until " : "", std::isfinite(until) ? FormatIsoUtc(until, 0).c_str() : "");
  std::printf("blocks of %g s of the imbalance low-pass filtered over %g s; false-alarm budget\n"
              "one per %g days per segment, shared by a bank of %d detectors\n",
              dopt.block_s, mopt.decision_inventory_filter_s, a.budget_days, file.detectors_in_bank);
  for (size_t i = 0; i < site.segments.size(); ++i) {
    if (!not_tuned[i].empty()) {
      std::printf("\nSegment %s (%s)\n  not tuned: %s\n", site.segments[i].id.c_str(),
                  site.segments[i].name.c_str(), not_tuned[i].c_str());
      continue;
    }
    Derive(dopt, shifts, &tuned[i]);
    Report(site.segments[i], tuned[i], extra[i], dopt.false_alarm_interval_s);
    file.segments.push_back(std::move(tuned[i]));
  }
  if (!WriteTuningFile(out_path, file, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }
  std::printf("\nwrote %s (%zu segment(s)%s)\n", out_path.c_str(), file.segments.size(),
              skipped ? ", some not tuned" : "");
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<TuneArgs>();
  CLI::App* cmd = app.add_subcommand(
      "tune", "Learn each segment's residual statistics from leak-free readings; write a tuning file");
  cmd->add_option("--config", args->config, "Site config (JSON)")->required();
  cmd->add_option("--data", args->data, "Leak-free readings CSV (time,point,value,quality); - for stdin")->required();
  cmd->add_option("--out", args->out, "Tuning file to write (default tuning.json; a directory gets tuning.json)");
  cmd->add_option("--block-s", args->block_s, "Residual block length, s (default 60; the decision stage's)");
  cmd->add_option("--budget-days", args->budget_days,
                  "False-alarm budget: mean days between false alarms per segment (default 90)");
  cmd->add_option("--until", args->until, "Stop reading at this time (ISO 8601, e.g. 2026-03-14T08:00:00Z)");
  cmd->callback([args, exit_code] { *exit_code = RunTune(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
