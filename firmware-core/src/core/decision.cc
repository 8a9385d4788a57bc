#include "holdfast/decision.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "holdfast/arl.h"

namespace holdfast {

const char* DecisionStateName(DecisionState s) {
  switch (s) {
    case DecisionState::kLearning: return "learning";
    case DecisionState::kWatching: return "watching";
    case DecisionState::kSuspect: return "suspect";
    case DecisionState::kLeak: return "leak";
    case DecisionState::kUnavailable: return "unavailable";
  }
  return "?";
}

bool DecisionOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = m; return false; };
  if (target_fractions.empty() || static_cast<int>(target_fractions.size()) > kMaxDetectors)
    return fail("decision: between 1 and " + std::to_string(kMaxDetectors) + " target leak sizes");
  for (double f : target_fractions)
    if (!(f > 0.0 && f < 1.0)) return fail("decision: target fractions must be in (0, 1)");
  if (!(false_alarm_interval_s >= 3600.0)) return fail("decision: false-alarm interval must be at least one hour");
  if (!(block_s > 0.0)) return fail("decision: block length must be positive");
  if (!(false_alarm_interval_s > 10.0 * block_s)) return fail("decision: false-alarm interval must be many blocks");
  if (!(learning_time_constant_s >= block_s)) return fail("decision: learning time constant shorter than a block");
  if (!(warmup_s >= 0.0)) return fail("decision: warm-up must not be negative");
  if (!(clip_sigmas >= 1.0)) return fail("decision: clip_sigmas must be at least 1");
  if (!(freeze_ratio > 0.0 && freeze_ratio < 1.0)) return fail("decision: freeze_ratio must be in (0, 1)");
  if (!(transient_hold_s >= 0.0) || !std::isfinite(transient_hold_s))
    return fail("decision: transient_hold_s must be zero or positive");
  if (!(input_filter_s >= 0.0) || !std::isfinite(input_filter_s))
    return fail("decision: input_filter_s must be zero or positive");
  if (!(volatility_time_constant_s >= 0.0) || !std::isfinite(volatility_time_constant_s))
    return fail("decision: volatility_time_constant_s must be zero or positive");
  if (!(volatility_clip_sigmas >= 1.0) || !std::isfinite(volatility_clip_sigmas))
    return fail("decision: volatility_clip_sigmas must be at least 1");
  if (!(volatility_free_ratio >= 1.0) || !std::isfinite(volatility_free_ratio))
    return fail("decision: volatility_free_ratio must be at least 1");
  return true;
}

std::string DecisionResult::ToString() const {
  char buf[200];
  std::snprintf(buf, sizeof buf, "%s%s bias=%.4f kg/s sigma=%.4f kg/s (x%.2f volatility) phi=%.3f leak=%.4f kg/s",
                DecisionStateName(state), reduced_sensitivity ? "(reduced)" : "", bias_kg_s, sigma_kg_s,
                volatility_scale, phi, leak_rate_kg_s);
  std::string s = buf;
  for (int i = 0; i < detector_count; ++i) {
    std::snprintf(buf, sizeof buf, " [%.3g kg/s: S=%.2f h=%.2f]", detectors[i].target_kg_s, detectors[i].statistic,
                  detectors[i].h);
    s += buf;
  }
  return s;
}

bool CusumThresholdTable::Build(double arl0_samples, std::string* why) {
  if (!(arl0_samples > 1.0)) {
    if (why) *why = "threshold table: in-control ARL must exceed one sample";
    return false;
  }
  arl0_ = arl0_samples;
  constexpr int kPoints = 33;
  constexpr double kSiegmundAbove = 25.0;
  constexpr double kMin = 0.01, kMax = 8.0;
  log_k_.assign(kPoints, 0.0);
  h_.assign(kPoints, 0.0);
  for (int i = 0; i < kPoints; ++i) {
    const double lk = std::log(kMin) + (std::log(kMax) - std::log(kMin)) * i / (kPoints - 1);
    log_k_[i] = lk;
    // Siegmund's approximation is accurate when h is large (small k), where
    // the Markov chain needs many states; the chain decides elsewhere.
    const double h_siegmund = CusumThresholdForArl(arl0_samples, std::exp(lk), false);
    h_[i] = h_siegmund > kSiegmundAbove ? h_siegmund : CusumThresholdForArl(arl0_samples, std::exp(lk), true);
  }
  return true;
}

double CusumThresholdTable::Lookup(double k) const {
  if (log_k_.empty()) return INFINITY;
  const double lk = std::log(std::max(k, 1e-300));
  if (lk <= log_k_.front()) return h_.front();
  if (lk >= log_k_.back()) return h_.back();
  const double step = log_k_[1] - log_k_[0];
  const int i = std::min(static_cast<int>((lk - log_k_[0]) / step), static_cast<int>(log_k_.size()) - 2);
  const double w = (lk - log_k_[i]) / step;
  return h_[i] + w * (h_[i + 1] - h_[i]);
}

bool SegmentDecision::Init(const DecisionOptions& options, double nominal_flow_kg_s,
                           const CusumThresholdTable* table, std::string* why) {
  if (!options.IsValid(why)) return false;
  if (!(nominal_flow_kg_s > 0.0)) {
    if (why) *why = "decision: the segment needs a positive nominal flow";
    return false;
  }
  if (table == nullptr) {
    if (why) *why = "decision: no threshold table";
    return false;
  }
  options_ = options;
  table_ = table;
  nominal_kg_s_ = nominal_flow_kg_s;
  result_ = DecisionResult{};
  result_.detector_count = static_cast<int>(options.target_fractions.size());
  for (int i = 0; i < result_.detector_count; ++i)
    result_.detectors[i].target_kg_s = options.target_fractions[i] * nominal_flow_kg_s;
  result_.arl0_blocks = table->arl0();
  started_ = false;
  block_kg_ = block_dt_ = block_inv_kg_ = 0.0;
  learnt_blocks_ = 0;
  inv_blocks_ = 0;
  mean_ = var_ = cov1_ = prev_dev_ = inv_mean_ = inv_var_ = 0.0;
  transient_until_s_ = -1e300;
  seeded_ = false;
  held_.assign(kMaxHeldBlocks, HeldBlock{});
  held_head_ = held_n_ = 0;
  block_index_ = 0;
  zero_index_.fill(0);
  alarm_from_ = INT64_MAX;
  deciding_ = 0;
  prev_e_ = 0.0;
  has_prev_e_ = false;
  volatility_ = 1.0;
  volatility_mean_ = 0.0;
  return true;
}

void SegmentDecision::Seed(double bias_kg_s, double sigma_kg_s, double phi, double inventory_rate_kg_s,
                           double inventory_rate_sigma_kg_s) {
  // The inventory-rate statistics must come with the rest or be learnt
  // afresh: left at zero variance behind a seeded (large) block count, the
  // transient test called every block a transient, and the reduced
  // sensitivity then held off the very learning that would end it.
  if (std::isfinite(inventory_rate_kg_s) && inventory_rate_sigma_kg_s > 0.0) {
    inv_mean_ = inventory_rate_kg_s;
    inv_var_ = inventory_rate_sigma_kg_s * inventory_rate_sigma_kg_s;
    inv_blocks_ = std::max<int64_t>(inv_blocks_, 1000);
  }
  mean_ = bias_kg_s;
  var_ = sigma_kg_s * sigma_kg_s;
  cov1_ = phi * var_;
  learnt_blocks_ = std::max<int64_t>(learnt_blocks_, 1000);
  result_.bias_kg_s = bias_kg_s;
  result_.sigma_kg_s = sigma_kg_s;
  result_.phi = phi;
  deciding_ = ~0u;  // seeded values are trusted: every detector decides at once
  seeded_ = true;
}

void SegmentDecision::ResetDetectors(int index, bool false_alarm) {
  for (int i = 0; i < result_.detector_count; ++i) {
    if (index >= 0 && i != index) continue;
    DetectorStatus& d = result_.detectors[i];
    d.statistic = 0.0;
    d.change_point_s = block_start_s_;
    d.sum_kg_s = 0.0;
    d.blocks = 0;
    d.cp_block_kg_s = has_prev_e_ ? prev_e_ : 0.0;
    zero_index_[i] = block_index_;
  }
  if (alarm_from_ != INT64_MAX) {
    if (!false_alarm) DropHeldAfter(alarm_from_);
    alarm_from_ = INT64_MAX;
  }
  if (result_.state == DecisionState::kLearning || result_.state == DecisionState::kUnavailable) return;
  int leading = 0;
  double best = -1.0;
  bool any_leak = false, any_suspect = false;
  for (int i = 0; i < result_.detector_count; ++i) {
    const DetectorStatus& d = result_.detectors[i];
    const double ratio = d.h > 0.0 ? d.statistic / d.h : (d.statistic > 0.0 ? INFINITY : 0.0);
    if (ratio > best) { best = ratio; leading = i; }
    if (d.statistic > d.h) any_leak = true;
    else if (d.statistic > options_.freeze_ratio * d.h) any_suspect = true;
  }
  result_.leading = leading;
  EstimateRate(result_.detectors[leading]);
  result_.state = any_leak ? DecisionState::kLeak : (any_suspect ? DecisionState::kSuspect : DecisionState::kWatching);
}

// Leak rate since the detector's change point. Without an input filter, the
// mean of (r - bias) over the blocks since then. With one (time constant
// tau), the blocks are increments of the filtered cumulative imbalance F,
// which lags C: C = F + tau dF/dt, so
//     C(t) - C(t_cp) = sum (r - bias) dt_block + tau (e_now - e_cp),
// with e the block rates r - bias at the last block and at the change
// point. A naive mean reads a fresh leak low by tau (1 - exp(-dt / tau)) / dt
// (81 % low at the first alarm was seen). The uncertainty adds the two
// block rates' noise, tau sigma sqrt 2, to the sum's, sqrt(n) sigma_lr dt_block.
void SegmentDecision::EstimateRate(const DetectorStatus& lead) {
  result_.change_point_s = lead.change_point_s;
  if (lead.blocks <= 0) {
    result_.leak_rate_kg_s = 0.0;
    result_.leak_rate_sigma_kg_s = 0.0;
    return;
  }
  const double n = static_cast<double>(lead.blocks);
  const double span_s = n * options_.block_s;
  const double tau = options_.input_filter_s;
  const double phi = result_.phi;
  const double sigma = result_.sigma_kg_s;
  const double sigma_lr = sigma * std::sqrt((1.0 + phi) / (1.0 - phi));
  double change_kg = lead.sum_kg_s * options_.block_s;
  double var = n * sigma_lr * sigma_lr * options_.block_s * options_.block_s;
  if (tau > 0.0) {
    change_kg += tau * (prev_e_ - lead.cp_block_kg_s);
    var += 2.0 * tau * tau * sigma * sigma;
  }
  result_.leak_rate_kg_s = change_kg / span_s;
  result_.leak_rate_sigma_kg_s = std::sqrt(var) / span_s;
}

void SegmentDecision::LearnOldestHeld() {
  const HeldBlock& b = held_[held_head_];
  Learn(b.r, b.inv_rate);
  held_head_ = (held_head_ + 1) % kMaxHeldBlocks;
  --held_n_;
}

void SegmentDecision::DropHeldAfter(int64_t index) {
  while (held_n_ > 0 && held_[(held_head_ + held_n_ - 1) % kMaxHeldBlocks].index > index) --held_n_;
}

void SegmentDecision::Learn(double r, double inv_rate) {
  const int64_t n = ++learnt_blocks_;
  const double w = std::max(1.0 / static_cast<double>(n), options_.block_s / options_.learning_time_constant_s);
  double dev = r - mean_;
  if (var_ > 0.0 && n > 10) {
    const double lim = options_.clip_sigmas * std::sqrt(var_);
    dev = std::clamp(dev, -lim, lim);
  }
  mean_ += w * dev;
  var_ = (1.0 - w) * (var_ + w * dev * dev);
  cov1_ = (1.0 - w) * cov1_ + w * dev * prev_dev_;
  prev_dev_ = dev;
  const int64_t n_inv = ++inv_blocks_;
  const double w_inv = std::max(1.0 / static_cast<double>(n_inv), options_.block_s / options_.learning_time_constant_s);
  const double idev = inv_rate - inv_mean_;
  inv_mean_ += w_inv * idev;
  inv_var_ = (1.0 - w_inv) * (inv_var_ + w_inv * idev * idev);
}

void SegmentDecision::Step(double t, double dt, bool valid, double imbalance_kg, double inventory_rate_kg_s) {
  if (!started_) {
    start_s_ = t;
    block_start_s_ = t;
    started_ = true;
  }
  if (!valid) {
    result_.state = DecisionState::kUnavailable;
    block_kg_ = block_dt_ = block_inv_kg_ = 0.0;  // a partial block across a gap is dropped
    block_start_s_ = t;
    has_prev_e_ = false;  // prewhitening restarts after the gap
    return;
  }
  if (result_.state == DecisionState::kUnavailable) result_.state = DecisionState::kWatching;
  if (dt <= 0.0) return;
  block_kg_ += imbalance_kg;
  block_dt_ += dt;
  block_inv_kg_ += inventory_rate_kg_s * dt;
  if (block_dt_ >= options_.block_s - 1e-9) EndBlock(t);
}

void SegmentDecision::EndBlock(double t) {
  const double r = block_kg_ / block_dt_;
  const double inv_rate = block_inv_kg_ / block_dt_;
  block_kg_ = block_dt_ = block_inv_kg_ = 0.0;
  block_start_s_ = t;

  // Transient: an inventory rate far outside its learnt spread.
  if (!transient_veto_ && inv_blocks_ > 30 && inv_var_ > 0.0 &&
      std::fabs(inv_rate - inv_mean_) > kTransientSigmas * std::sqrt(inv_var_)) {
    transient_until_s_ = std::max(transient_until_s_, t + options_.transient_hold_s);
  }
  const bool reduced = t < transient_until_s_;
  result_.reduced_sensitivity = reduced;

  // Seeded values need no warm-up: decisions start with the first block.
  const bool warm = !seeded_ && ((t - start_s_) < options_.warmup_s || learnt_blocks_ < 20);
  if (warm) {
    Learn(r, inv_rate);
    result_.state = DecisionState::kLearning;
  }
  const double phi = var_ > 0.0 ? std::clamp(cov1_ / var_, -0.9, 0.9) : 0.0;
  const double sigma = std::sqrt(var_);
  result_.bias_kg_s = mean_;
  result_.sigma_kg_s = sigma;
  result_.phi = phi;
  // Prewhitening: the detectors see the AR(1) innovation of the block
  // deviation e, not e itself,
  //     z = (e_t - phi e_{t-1}) / (sigma sqrt(1 - phi^2)),
  // which is N(0, 1) and independent from block to block in control, so the
  // independent-sample ARL that sets h holds for every k (the residual chart
  // of Alwan & Roberts 1988, J. Business & Economic Statistics 6; its CUSUM
  // form studied by Lu & Reynolds 2001, J. Quality Technology 33; from
  // memory). A step leak of rate d shifts z by d (1 - phi) / (sigma
  // sqrt(1 - phi^2)) = d / sigma_eff once past its first block, sigma_eff =
  // sigma sqrt((1 + phi)/(1 - phi)) the long-run sigma, so k = d / (2
  // sigma_eff) as before. Dividing e by sigma_eff instead (variance
  // inflation) is right only for long runs: it left z with a marginal
  // variance (1 - phi)/(1 + phi), and the short-run detectors of the bank
  // (large k, small h) ran tens of times too long for phi = 0.5 and more
  // than ten times too short for phi = -0.3.
  const double e = r - mean_;
  const double prev_e = prev_e_;
  const bool has_prev = has_prev_e_;
  prev_e_ = e;
  has_prev_e_ = true;
  if (warm || !(sigma > 0.0)) return;

  const double sigma_lr = sigma * std::sqrt((1.0 + phi) / (1.0 - phi));  // long-run sigma of the blocks
  const double sigma_eff = sigma_lr;
  // The first block after a start or a gap has no predecessor: its marginal
  // distribution is N(0, sigma^2).
  const double z_raw = has_prev ? (e - phi * prev_e) / (sigma * std::sqrt(1.0 - phi * phi)) : e / sigma;
  // Local volatility (options' comment): this block is judged with the
  // volatility seen before it, then joins it (not while a transient holds
  // the statistics: an operator's step is not the model's usual error).
  const double scale = std::sqrt(std::max(1.0, volatility_ - (options_.volatility_free_ratio - 1.0)));
  const double z = z_raw / scale;
  result_.volatility_scale = scale;
  if (options_.volatility_time_constant_s > 0.0) {
    const double a = std::min(1.0, options_.block_s / options_.volatility_time_constant_s);
    const double c = options_.volatility_clip_sigmas;
    const double zc = std::clamp(z_raw, -c, c);
    const double dev = zc - volatility_mean_;
    volatility_mean_ += a * dev;
    volatility_ += a * (dev * dev * (1.0 - a) - volatility_);
  }
  ++block_index_;
  // Detectors start as the bias becomes known well enough for them (see
  // kStartBiasErrorFraction): the small-k ones are the sensitive ones. With
  // every detector deciding after a one-hour warm-up, a bias error of
  // sigma_lr / sqrt(60) = 0.13 sigma_lr against k = 0.1 for a 0.5 % target
  // at 2.5 % noise gave a false alarm within two weeks in a quarter of cold
  // starts (a permanent one in 4 %: learning stays frozen behind it).
  const double max_needed = 2.0 * options_.learning_time_constant_s / options_.block_s;
  int leading = 0;
  double best = -1.0;
  bool any_leak = false, any_suspect = false;
  for (int i = 0; i < result_.detector_count; ++i) {
    DetectorStatus& d = result_.detectors[i];
    // While an operating transient holds sensitivity down, the statistics
    // (and their k and h) are held where they were: the line-pack estimate
    // is least trustworthy then. Widening sigma threefold instead, as this
    // did first, let a restart after a shut-in carry even the one-block
    // detectors over their thresholds (`holdfast evaluate`, weekly
    // shut-ins). Large sudden leaks are the rupture path's.
    if (reduced) {
      const double held = d.h > 0.0 ? d.statistic / d.h : (d.statistic > 0.0 ? INFINITY : 0.0);
      if (held > best) { best = held; leading = i; }
      if (d.statistic > d.h) any_leak = true;
      else if (d.statistic > options_.freeze_ratio * d.h) any_suspect = true;
      continue;
    }
    d.k = 0.5 * d.target_kg_s / sigma_eff;
    d.h = table_->Lookup(d.k);
    if (!(deciding_ & (1u << i))) {
      const double f_k = kStartBiasErrorFraction * 0.5 * d.target_kg_s / sigma_lr;
      if (static_cast<double>(learnt_blocks_) * f_k * f_k >= 1.0 ||
          static_cast<double>(learnt_blocks_) >= max_needed)
        deciding_ |= 1u << i;
    }
    d.statistic = (deciding_ & (1u << i)) ? std::max(0.0, d.statistic + z - d.k) : 0.0;
    if (d.statistic <= 0.0) {
      d.change_point_s = t;
      d.sum_kg_s = 0.0;
      d.blocks = 0;
      d.cp_block_kg_s = e;
      zero_index_[i] = block_index_;
    } else {
      d.sum_kg_s += r - mean_;
      ++d.blocks;
    }
    const double ratio = d.statistic / d.h;
    if (ratio > best) { best = ratio; leading = i; }
    if (d.statistic > d.h) any_leak = true;
    else if (d.statistic > options_.freeze_ratio * d.h) any_suspect = true;
  }
  result_.leading = leading;
  EstimateRate(result_.detectors[leading]);
  result_.state = any_leak ? DecisionState::kLeak : (any_suspect ? DecisionState::kSuspect : DecisionState::kWatching);
  // Learning lags the detectors (see the header). Skipping the blocks seen
  // while a detector is high, as this did at first, learns from a sample
  // selected on its own values (the low ones): the bias drifted down and, at
  // a budget of a few thousand blocks per detector, the false-alarm rate rose
  // some twenty-fold. Learning every block up to the freeze let a leak at the
  // smallest target size be partly learnt before its detector reached
  // freeze_ratio * h: 12 % later detection on average, and now and then
  // (about 1 run in 300) a leak absorbed for weeks.
  if (result_.state == DecisionState::kLeak) {
    // Held, not learnt, until the alarm is handled (ResetDetectors).
    for (int i = 0; i < result_.detector_count; ++i)
      if (result_.detectors[i].statistic > result_.detectors[i].h) alarm_from_ = std::min(alarm_from_, zero_index_[i]);
    if (!reduced && held_n_ < kMaxHeldBlocks) held_[(held_head_ + held_n_++) % kMaxHeldBlocks] = {block_index_, r, inv_rate};
    return;
  }
  if (alarm_from_ != INT64_MAX) {  // the alarm cleared by itself: a leak may have stopped
    DropHeldAfter(alarm_from_);
    alarm_from_ = INT64_MAX;
  }
  const bool frozen = result_.state == DecisionState::kSuspect;
  if (!reduced) {
    if (held_n_ == kMaxHeldBlocks && !frozen) LearnOldestHeld();  // the lag is bounded
    if (held_n_ < kMaxHeldBlocks) held_[(held_head_ + held_n_++) % kMaxHeldBlocks] = {block_index_, r, inv_rate};
  }
  if (frozen) return;
  int64_t settled = block_index_;
  for (int i = 0; i < result_.detector_count; ++i) settled = std::min(settled, zero_index_[i]);
  while (held_n_ > 0 && held_[held_head_].index <= settled) LearnOldestHeld();
}

}  // namespace holdfast
