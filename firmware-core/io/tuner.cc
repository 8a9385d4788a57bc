// Offline tuning from leak-free data (tuner.h).
#include "tuner.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "holdfast/arl.h"

namespace holdfast {
namespace {

// Normal-consistent MAD: sigma = kMadToSigma * median|x - median| (1/Phi^-1(0.75)).
constexpr double kMadToSigma = 1.482602218505602;
// Block deviations are clipped at this many robust sigmas for phi.
constexpr double kPhiClipSigmas = 3.0;
constexpr double kPhiLimit = 0.9;
// Blocks are used from this many filter time constants after the decision
// input's filter (re)starts (at the first tick and after every gap): exp(-6)
// leaves 0.25 % of the restart's lag.
constexpr double kFilterSettleConstants = 6.0;

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

template <typename BlockT>
BlockStatistics BlockStats(const std::vector<double>& r, const std::vector<BlockT>& blocks) {
  BlockStatistics st;
  st.median = MedianOf(r);
  st.sigma = RobustSigmaOf(r, st.median);
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


}  // namespace

double MedianOf(std::vector<double> v) {
  if (v.empty()) return kNaN;
  const size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid), v.end());
  const double upper = v[mid];
  if (v.size() % 2 == 1) return upper;
  const double lower = *std::max_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid));
  return 0.5 * (lower + upper);
}

double RobustSigmaOf(const std::vector<double>& v, double median) {
  std::vector<double> dev(v.size());
  for (size_t i = 0; i < v.size(); ++i) dev[i] = std::fabs(v[i] - median);
  return kMadToSigma * MedianOf(dev);
}

bool Tuner::Init(const Site& site, const Monitor::Options& options, std::string* why) {
  if (!options.IsValid(why)) return false;
  const DecisionOptions& decision = options.decision;
  const double inventory_filter_s = options.decision_inventory_filter_s;
  if (!(decision.block_s >= site.tick_s)) {
    *why = "block of " + std::to_string(decision.block_s) + " s is shorter than the site's tick";
    return false;
  }
  if (!(inventory_filter_s > 0.0) || !std::isfinite(inventory_filter_s)) {
    *why = "inventory filter time constant must be positive";
    return false;
  }
  site_ = &site;
  decision_ = decision;
  filter_s_ = inventory_filter_s;
  builders_.assign(site.segments.size(), Builder(inventory_filter_s, options.decision_settle_s));
  ticked_ = false;
  prev_tick_s_ = 0.0;
  ticks_ = 0;
  return true;
}

void Tuner::Tick(const Monitor& monitor, double t) {
  const double dt = ticked_ ? t - prev_tick_s_ : 0.0;
  const int n = std::min(monitor.segment_count(), static_cast<int>(builders_.size()));
  for (int s = 0; s < n; ++s) TickSegment(&builders_[static_cast<size_t>(s)], monitor.segment(s), dt);
  prev_tick_s_ = t;
  ticked_ = true;
  ++ticks_;
}

// Forms one segment's blocks from its ticks, as SegmentDecision::Step does
// with the input Monitor::TickSegment gives it (DecisionInput).
void Tuner::TickSegment(Builder* b, const SegmentTick& t, double dt) const {
  if (t.status == SegmentStatus::kUnavailable) b->unavailable_s += dt;
  b->input.Tick(t, dt);
  if (!b->input.valid()) {
    if (b->dt > 0.0) ++b->dropped;  // a partial block across a gap is dropped
    b->kg = b->raw_kg = b->dt = b->inv_kg = 0.0;
    b->start_s = t.time_s;
    // The filter restarts at the first tick of a gap; the ticks after it
    // while it settles are not valid either.
    if (!b->in_gap) b->filter_start_s = t.time_s;
    b->in_gap = true;
    return;
  }
  b->in_gap = false;
  b->kg += b->input.imbalance_kg();
  b->raw_kg += t.residual_kg_s * dt;
  b->inv_kg += b->input.inventory_rate_kg_s() * dt;
  b->dt += dt;
  if (b->dt >= decision_.block_s - 1e-9) {
    // The filtered imbalance restarts flat and reaches the imbalance's slope
    // over a few time constants (exp(-t / filter_s)): blocks in the first
    // kFilterSettleConstants of them are not in-control behaviour.
    if (b->start_s < b->filter_start_s + kFilterSettleConstants * filter_s_) ++b->settling;
    else b->blocks.push_back(Block{b->start_s, t.time_s, b->kg / b->dt, b->inv_kg / b->dt, b->raw_kg / b->dt});
    b->kg = b->raw_kg = b->dt = b->inv_kg = 0.0;
    b->start_s = t.time_s;
  }
}

bool Tuner::Estimate(const SegmentSpec& spec, const Builder& b, SegmentTuning* s, TunerSegmentReport* x) const {
  const double block_s = decision_.block_s;
  std::string* why = &x->not_tuned;
  const std::vector<Block>& blocks = b.blocks;
  s->segment = spec.id;
  s->block_s = block_s;
  s->blocks = static_cast<int64_t>(blocks.size());
  s->blocks_dropped = b.dropped;
  s->nominal_flow_kg_s = std::isfinite(spec.nominal_flow_kg_s) && spec.nominal_flow_kg_s > 0.0
                             ? spec.nominal_flow_kg_s : kNaN;
  x->unavailable_s = b.unavailable_s;
  x->settling_blocks = b.settling;
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
  const BlockStatistics st = BlockStats(r, blocks);
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
  s->inventory_rate_kg_s = MedianOf(inv);
  s->inventory_rate_sigma_kg_s = RobustSigmaOf(inv, s->inventory_rate_kg_s);
  for (double v : inv)
    if (std::fabs(v - s->inventory_rate_kg_s) > kTransientSigmas * s->inventory_rate_sigma_kg_s) ++x->transient_blocks;

  // A leak in the "leak-free" data shows as a step: compare the means of the
  // two halves (deviations from each half's median, clipped at 3 sigma
  // against transients). The noise is measured within the halves, so that
  // the step itself does not inflate it: the standard error of a mean of n
  // blocks is sigma_w sqrt((1 + phi_w)/(1 - phi_w)) / sqrt(n) (AR(1)
  // long-run variance; arl.h, CusumArlAutocorrelatedInflation).
  const size_t half = r.size() / 2;
  const double med1 = MedianOf(std::vector<double>(r.begin(), r.begin() + static_cast<std::ptrdiff_t>(half)));
  const double med2 = MedianOf(std::vector<double>(r.begin() + static_cast<std::ptrdiff_t>(half), r.end()));
  std::vector<double> within(r.size());
  for (size_t i = 0; i < r.size(); ++i) within[i] = r[i] - (i < half ? med1 : med2);
  const BlockStatistics w = BlockStats(within, blocks);
  const double lim = kPhiClipSigmas * w.sigma;
  double sum1 = 0.0, sum2 = 0.0;
  for (size_t i = 0; i < r.size(); ++i) (i < half ? sum1 : sum2) += std::clamp(within[i], -lim, lim);
  const double n1 = static_cast<double>(half), n2 = static_cast<double>(r.size() - half);
  const double se = w.sigma * std::sqrt(CusumArlAutocorrelatedInflation(w.phi) * (1.0 / n1 + 1.0 / n2));
  x->drift_kg_s = (med2 + sum2 / n2) - (med1 + sum1 / n1);
  x->drift_z = se > 0.0 ? x->drift_kg_s / se : 0.0;
  return true;
}


bool Tuner::Finish(TuningFile* file, std::vector<TunerSegmentReport>* reports) const {
  reports->assign(builders_.size(), TunerSegmentReport{});
  file->false_alarm_interval_s = decision_.false_alarm_interval_s;
  file->detectors_in_bank = static_cast<int>(decision_.target_fractions.size());
  file->inventory_filter_s = filter_s_;
  file->segments.clear();
  if (site_ == nullptr) return false;
  // The tuned-CUSUM shift for each detection time depends only on the
  // per-detector ARL and the block length: the same for every segment.
  const double arl0 = ArlFromBudget(decision_.false_alarm_interval_s, decision_.block_s,
                                    static_cast<int>(decision_.target_fractions.size()));
  std::vector<ShiftAtTime> shifts;
  for (double t : kDetectionTimes_s) {
    ShiftAtTime s;
    s.detection_s = t;
    double delay = kNaN;
    s.shift_sigma = MinimumShift(arl0, t / decision_.block_s, &delay);
    s.delay_s = delay * decision_.block_s;
    shifts.push_back(s);
  }
  for (size_t i = 0; i < builders_.size(); ++i) {
    SegmentTuning s;
    if (!Estimate(site_->segments[i], builders_[i], &s, &(*reports)[i])) continue;
    Derive(decision_, shifts, &s);
    file->segments.push_back(std::move(s));
  }
  return !file->segments.empty();
}

}  // namespace holdfast
