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
  return true;
}

std::string DecisionResult::ToString() const {
  char buf[200];
  std::snprintf(buf, sizeof buf, "%s%s bias=%.4f kg/s sigma=%.4f kg/s phi=%.3f leak=%.4f kg/s",
                DecisionStateName(state), reduced_sensitivity ? "(reduced)" : "", bias_kg_s, sigma_kg_s, phi,
                leak_rate_kg_s);
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
  mean_ = var_ = cov1_ = prev_dev_ = inv_mean_ = inv_var_ = 0.0;
  transient_until_s_ = -1e300;
  return true;
}

void SegmentDecision::Seed(double bias_kg_s, double sigma_kg_s, double phi) {
  mean_ = bias_kg_s;
  var_ = sigma_kg_s * sigma_kg_s;
  cov1_ = phi * var_;
  learnt_blocks_ = std::max<int64_t>(learnt_blocks_, 1000);
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
  const double idev = inv_rate - inv_mean_;
  inv_mean_ += w * idev;
  inv_var_ = (1.0 - w) * (inv_var_ + w * idev * idev);
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
  if (learnt_blocks_ > 30 && inv_var_ > 0.0 &&
      std::fabs(inv_rate - inv_mean_) > kTransientSigmas * std::sqrt(inv_var_)) {
    transient_until_s_ = t + kTransientHold_s;
  }
  const bool reduced = t < transient_until_s_;
  result_.reduced_sensitivity = reduced;

  const bool warm = (t - start_s_) < options_.warmup_s || learnt_blocks_ < 20;
  if (warm) {
    Learn(r, inv_rate);
    result_.state = DecisionState::kLearning;
  }
  const double phi = var_ > 0.0 ? std::clamp(cov1_ / var_, -0.9, 0.9) : 0.0;
  const double sigma = std::sqrt(var_);
  result_.bias_kg_s = mean_;
  result_.sigma_kg_s = sigma;
  result_.phi = phi;
  if (warm || !(sigma > 0.0)) return;

  const double sigma_eff = sigma * std::sqrt((1.0 + phi) / (1.0 - phi)) * (reduced ? kTransientInflation : 1.0);
  const double z = (r - mean_) / sigma_eff;
  int leading = 0;
  double best = -1.0;
  bool any_leak = false, any_suspect = false;
  for (int i = 0; i < result_.detector_count; ++i) {
    DetectorStatus& d = result_.detectors[i];
    d.k = 0.5 * d.target_kg_s / sigma_eff;
    d.h = table_->Lookup(d.k);
    d.statistic = std::max(0.0, d.statistic + z - d.k);
    if (d.statistic <= 0.0) {
      d.change_point_s = t;
      d.sum_kg_s = 0.0;
      d.blocks = 0;
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
  const DetectorStatus& lead = result_.detectors[leading];
  result_.leak_rate_kg_s = lead.blocks > 0 ? lead.sum_kg_s / static_cast<double>(lead.blocks) : 0.0;
  result_.change_point_s = lead.change_point_s;
  result_.state = any_leak ? DecisionState::kLeak : (any_suspect ? DecisionState::kSuspect : DecisionState::kWatching);
  if (result_.state == DecisionState::kWatching && !reduced) Learn(r, inv_rate);
}

}  // namespace holdfast
