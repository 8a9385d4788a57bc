// Continuous district (DMA) balance with burst detection. See holdfast/water.h.
//
// Per tick: the zone's cumulative consumption
//     C = sum (inflow - outflow) dt - (S - S0)
// (S the reservoir contents) and the cumulative estimated customer use are
// low-pass filtered (first order, filter_s), as the pipeline monitor does with
// its cumulative imbalance, so that level noise on a reservoir enters only
// through the filter. Blocks of block_s (one time-of-day bin) give the block
// residual r = (dC_f - dU_f) / block, U the customer use from aggregated
// smart meters (zero without them: the demand is then modelled by the learnt
// profile alone).
//
// Demand follows the day: the block residual is compared with a profile
// learnt per time-of-day bin (mean and spread over the first days, then a
// slow exponential update while nothing is suspected). The standardised
// deviation z = (r - mean_bin) / sd_bin, which weights the quiet night blocks
// far more than the noisy day blocks, goes into the same detector bank the
// pipeline segments use (SegmentDecision, decision.h: learnt bias, sigma and
// lag-one autocorrelation, prewhitening, one-sided CUSUMs with thresholds
// from the false-alarm budget). A burst is a sustained step up in z. Its size
// is the mean of r - mean_bin since the leading detector's change point.
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <string>

#include "holdfast/arl.h"
#include "holdfast/water.h"

namespace holdfast::water {
namespace {
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr int kRecentBlocks = 2048;  // burst size look-back (21 days of 15-min blocks)
constexpr double kWaterDensity_kg_m3 = 1000.0;  // nominal, only to carry m3/s in kg/s alarm evidence
// Time-of-day bin of a block index, in [0, bins) also before 1970.
int BinOf(double block_index, int bins) {
  const double b = std::fmod(block_index, static_cast<double>(bins));
  return std::clamp(static_cast<int>(b < 0.0 ? b + bins : b), 0, bins - 1);
}
}  // namespace

bool DistrictMonitorOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = "district: " + m; return false; };
  if (!(block_s >= 60.0 && block_s <= 3600.0)) return fail("block must be 60..3600 s");
  const double bins = kSecondsPerDay / block_s;
  if (std::fabs(bins - std::round(bins)) > 1e-9) return fail("a day must be a whole number of blocks");
  if (!(filter_s > 0.0 && filter_s <= block_s)) return fail("filter time constant must be in (0, block] s");
  if (profile_learning_days < 2 || profile_learning_days > 60) return fail("profile learning days must be 2..60");
  if (!(profile_time_constant_days >= 1.0)) return fail("profile time constant must be at least 1 day");
  if (spread_pool_bins < 0 || spread_pool_bins > 8) return fail("spread pool must be 0..8 bins");
  if (target_sigmas.empty() || static_cast<int>(target_sigmas.size()) > kMaxDetectors)
    return fail("between 1 and " + std::to_string(kMaxDetectors) + " target burst sizes");
  for (double s : target_sigmas)
    if (!(s > 0.0 && s < 100.0)) return fail("target burst sizes must be in (0, 100) sigmas");
  if (!(false_alarm_interval_s >= 86400.0)) return fail("false-alarm interval must be at least a day");
  if (!(std::fabs(utc_offset_s) <= 14.0 * 3600.0)) return fail("utc offset must be within +-14 h");
  if (!(quiet_start_h >= 0.0 && quiet_end_h <= 24.0 && quiet_end_h > quiet_start_h))
    return fail("quiet hours must satisfy 0 <= start < end <= 24");
  if (!(min_valid_fraction > 0.0 && min_valid_fraction <= 1.0)) return fail("min valid fraction must be in (0, 1]");
  return alarm.IsValid(why);
}

std::string DistrictTick::ToString() const {
  char buf[256];
  std::snprintf(buf, sizeof buf,
                "t=%.0f %s in %.4f out %.4f storage %.1f m3 zone %.5f customer %.5f residual %.5f m3/s", time_s,
                valid ? "valid" : "invalid", inflow_m3_s, outflow_m3_s, storage_m3, zone_flow_m3_s,
                customer_use_m3_s, residual_m3_s);
  return buf;
}

bool DistrictMonitor::Init(int district, const DistrictMonitorOptions& options, bool has_customer_meters,
                           SequenceCounter* seq, AlarmEventSink* sink, std::string* why) {
  if (!options.IsValid(why)) return false;
  o_ = options;
  district_ = district;
  has_customer_ = has_customer_meters;
  bins_ = static_cast<int>(std::lround(kSecondsPerDay / o_.block_s));
  const double max_target = *std::max_element(o_.target_sigmas.begin(), o_.target_sigmas.end());
  const double nominal = 2.0 * max_target;  // the bank takes targets as fractions in (0, 1)
  DecisionOptions d;
  d.target_fractions.clear();
  for (double s : o_.target_sigmas) d.target_fractions.push_back(s / nominal);
  d.false_alarm_interval_s = o_.false_alarm_interval_s;
  d.block_s = o_.block_s;
  d.warmup_s = 4.0 * o_.block_s;
  const double arl0 = ArlFromBudget(o_.false_alarm_interval_s, o_.block_s, static_cast<int>(o_.target_sigmas.size()));
  if (!table_.Build(arl0, why)) return false;
  if (!decision_.Init(d, nominal, &table_, why)) return false;
  AlarmOptions ao = o_.alarm;
  if (!alarm_.Init(district, AlarmType::kLeak, ao, seq, sink, why)) return false;
  tick_ = DistrictTick{};
  evidence_ = BurstEvidence{};
  have_prev_ = started_ = block_open_ = profile_ready_ = false;
  cum_zone_m3_ = cum_cust_m3_ = f_zone_ = f_cust_ = prev_f_zone_ = prev_f_cust_ = 0.0;
  mean_.assign(bins_, 0.0);
  var_.assign(bins_, 0.0);
  learn_.assign(static_cast<size_t>(bins_) * o_.profile_learning_days, kNaN);
  first_day_ = INT64_MIN;
  recent_.assign(kRecentBlocks, Block{});
  recent_head_ = recent_n_ = 0;
  burst_pending_ = false;
  was_quiet_ = false;
  last_burst_ = BurstEvidence{};
  bursts_ = 0;
  return true;
}

void DistrictMonitor::ResetDetectors(bool false_alarm) {
  decision_.ResetDetectors(-1, false_alarm);
  evidence_.state = decision_.result().state;
}

void DistrictMonitor::Step(double t, double dt, bool valid, double inflow_m3_s, double outflow_m3_s,
                           double storage_m3, double customer_use_m3_s) {
  // Not a time, or time running backwards: ignored.
  if (!std::isfinite(t) || std::fabs(t) > 1e12 || (started_ && t < tick_.time_s)) return;
  valid = valid && std::isfinite(inflow_m3_s) && std::isfinite(outflow_m3_s) && std::isfinite(storage_m3) &&
          (!has_customer_ || std::isfinite(customer_use_m3_s)) && dt > 0.0;
  if (!started_) {
    started_ = true;
    start_s_ = t;
  }
  if (valid) {
    if (have_prev_) {
      cum_zone_m3_ += (inflow_m3_s - outflow_m3_s) * dt - (storage_m3 - prev_storage_);
      if (has_customer_) cum_cust_m3_ += customer_use_m3_s * dt;
    }
    prev_storage_ = storage_m3;
    have_prev_ = true;
  } else {
    have_prev_ = false;  // the next valid tick re-baselines: a gap never becomes an imbalance
  }
  prev_f_zone_ = f_zone_;
  prev_f_cust_ = f_cust_;
  // The filter stands still through a gap, so that it resumes with the lag
  // it had (letting it settle on the frozen sums would read as low flow).
  if (valid) {
    const double a = 1.0 - std::exp(-dt / o_.filter_s);
    f_zone_ += a * (cum_zone_m3_ - f_zone_);
    f_cust_ += a * (cum_cust_m3_ - f_cust_);
  }

  const int bin = BinOf(std::floor(t / o_.block_s), bins_);
  tick_.time_s = t;
  tick_.valid = valid;
  tick_.inflow_m3_s = inflow_m3_s;
  tick_.outflow_m3_s = outflow_m3_s;
  tick_.storage_m3 = storage_m3;
  tick_.zone_flow_m3_s = dt > 0.0 ? (f_zone_ - prev_f_zone_) / dt : 0.0;
  if (has_customer_) {
    tick_.customer_use_m3_s = dt > 0.0 ? (f_cust_ - prev_f_cust_) / dt : 0.0;
  } else {
    tick_.customer_use_m3_s = profile_ready_ ? mean_[std::clamp(bin, 0, bins_ - 1)] : kNaN;
  }
  tick_.residual_m3_s = tick_.zone_flow_m3_s - tick_.customer_use_m3_s;

  // Blocks on the grid of block_s.
  if (block_open_ && t >= block_start_s_ + o_.block_s - 1e-9) EndBlock(t);
  if (!block_open_) {
    block_open_ = true;
    block_start_s_ = std::floor(t / o_.block_s + 1e-12) * o_.block_s;
    block_zone0_ = f_zone_;
    block_cust0_ = f_cust_;
    block_dt_ = 0.0;
    block_valid_dt_ = 0.0;
    tick_.time_s = t;
  } else {
    block_dt_ += dt;
    if (valid) block_valid_dt_ += dt;
  }

  // The alarm's condition is one tick long per detected burst: the alarm
  // (non-latching by default here) raises at once, and returns to normal
  // after its hold unless the next burst comes first.
  const BurstEvidence& src = burst_pending_ ? last_burst_ : evidence_;
  AlarmEvidence ev;
  ev.leak_rate_kg_s = src.burst_m3_s * kWaterDensity_kg_m3;
  ev.statistic = src.statistic;
  ev.threshold = src.threshold;
  ev.window_s = t - src.change_point_s;
  ev.SetDetail("burst");
  alarm_.Update(t, burst_pending_, ev);
  if (burst_pending_) ++bursts_;
  burst_pending_ = false;
}

void DistrictMonitor::EndBlock(double t) {
  block_open_ = false;
  const double elapsed = t - block_start_s_;
  const bool ok = block_dt_ > 0.0 && block_valid_dt_ >= o_.min_valid_fraction * o_.block_s && elapsed > 0.0;
  const double covered = std::max(block_dt_, 1e-9);
  const double r = ((f_zone_ - block_zone0_) - (f_cust_ - block_cust0_)) / covered;
  const int bin = BinOf(std::round(block_start_s_ / o_.block_s), bins_);
  const int64_t day = static_cast<int64_t>(std::floor(block_start_s_ / kSecondsPerDay));
  const int days = o_.profile_learning_days;

  if (!profile_ready_) {
    if (first_day_ == INT64_MIN) first_day_ = day;
    const int64_t age = day - first_day_;
    if (age < 0) return;
    if (ok) learn_[static_cast<size_t>(bin) * days + static_cast<size_t>(age % days)] = r;
    // At the last bin of a day, once enough days have been seen, try to form
    // the profile: every bin needs two values.
    if (bin == bins_ - 1 && age + 1 >= days) {
      bool enough = true;
      for (int b = 0; b < bins_ && enough; ++b) {
        int n = 0;
        double s = 0.0;
        for (int d = 0; d < days; ++d) {
          const double v = learn_[static_cast<size_t>(b) * days + d];
          if (std::isfinite(v)) { s += v; ++n; }
        }
        if (n < 2) enough = false;
        mean_[b] = n > 0 ? s / n : 0.0;
      }
      if (enough) {
        for (int b = 0; b < bins_; ++b) {
          double ss = 0.0;
          int n = 0;
          for (int k = -o_.spread_pool_bins; k <= o_.spread_pool_bins; ++k) {
            const int bb = ((b + k) % bins_ + bins_) % bins_;
            int nb = 0;
            for (int d = 0; d < days; ++d) {
              const double v = learn_[static_cast<size_t>(bb) * days + d];
              if (std::isfinite(v)) { ss += (v - mean_[bb]) * (v - mean_[bb]); ++nb; }
            }
            n += nb - 1;  // one degree of freedom per bin for its mean
          }
          // Floor: 1 % of the bin's mean, and 1e-5 m3/s (0.036 m3/h).
          const double floor_sd = std::max(0.01 * std::fabs(mean_[b]), 1e-5);
          var_[b] = std::max(n > 0 ? ss / n : 0.0, floor_sd * floor_sd);
        }
        profile_ready_ = true;
        evidence_.profile_ready = true;
      }
    }
    return;
  }

  const double dev = r - mean_[bin];
  const double sd = std::sqrt(var_[bin]);
  const double z = dev / sd;
  const double local_h = std::fmod(block_start_s_ + o_.utc_offset_s + 10.0 * kSecondsPerDay, kSecondsPerDay) / kSecondsPerHour;
  const bool quiet = local_h >= o_.quiet_start_h - 1e-9 && local_h < o_.quiet_end_h - 1e-9;
  if (!quiet) {
    // Outside the quiet hours the detectors wait; the first block after the
    // night breaks the prewhitening chain (a gap for the bank).
    if (was_quiet_) decision_.Step(t, o_.block_s, false, 0.0, 0.0);
    was_quiet_ = false;
    if (ok && decision_.result().state != DecisionState::kSuspect) UpdateProfile(bin, dev, sd);
    return;
  }
  was_quiet_ = true;
  decision_.Step(t, o_.block_s, ok, z * o_.block_s, 0.0);
  const DecisionResult& res = decision_.result();
  if (ok) {
    recent_[recent_head_] = {t, dev};
    recent_head_ = (recent_head_ + 1) % kRecentBlocks;
    recent_n_ = std::min(recent_n_ + 1, kRecentBlocks);
  }
  evidence_.state = res.state;
  if (res.leading >= 0) {
    const DetectorStatus& lead = res.detectors[res.leading];
    evidence_.statistic = lead.statistic;
    evidence_.threshold = lead.h;
  }
  evidence_.change_point_s = res.change_point_s;
  double sum = 0.0;
  int n = 0;
  for (int i = 0; i < recent_n_; ++i) {
    const Block& b = recent_[(recent_head_ - 1 - i + kRecentBlocks) % kRecentBlocks];
    if (b.end_s <= res.change_point_s) break;
    sum += b.dev_m3_s;
    ++n;
  }
  evidence_.burst_m3_s = n > 0 ? sum / n : 0.0;
  if (res.state == DecisionState::kLeak) {
    // A new burst: report it (the alarm sees the condition at the next
    // Update), then take the step into the profile as the district's new
    // normal and restart the detectors, so that the next burst is a new step.
    burst_pending_ = true;
    last_burst_ = evidence_;
    for (int b = 0; b < bins_; ++b) mean_[b] += evidence_.burst_m3_s;
    decision_.ResetDetectors(-1, false);
    evidence_.state = decision_.result().state;
    return;
  }
  if (ok && res.state == DecisionState::kWatching) UpdateProfile(bin, dev, sd);
}

// The profile keeps learning slowly while nothing is suspected (clipped at
// three spreads, so one odd day does not move it much).
void DistrictMonitor::UpdateProfile(int bin, double dev, double sd) {
  const double w = 1.0 / o_.profile_time_constant_days;
  const double d = std::clamp(dev, -3.0 * sd, 3.0 * sd);
  mean_[bin] += w * d;
  const double floor_sd = std::max(0.01 * std::fabs(mean_[bin]), 1e-5);
  var_[bin] = std::max((1.0 - w) * (var_[bin] + w * d * d), floor_sd * floor_sd);
}

}  // namespace holdfast::water
