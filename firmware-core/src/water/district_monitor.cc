// Continuous district (DMA) balance with burst detection. See holdfast/water.h.
//
// Per tick: the zone's cumulative consumption
//     C = sum (inflow - outflow) dt - (S - S0)
// (S the reservoir contents) is low-pass filtered (first order, filter_s),
// as the pipeline monitor does with its cumulative imbalance, so that level
// noise on a reservoir enters only through the filter. Blocks of block_s
// (hourly by default) take the filtered zone volume; customer volumes from
// smart meters arrive separately as volumes over intervals (interval totals
// arrive at the end of their interval) and are spread over the blocks they
// cover. A block is decided when its customer volume is complete, or after
// customer_wait_s. The block residual is zone use minus metered use (scaled
// by coverage), or zone use alone without customer meters.
//
// Two paths decide on the residual:
//   * Night path. A burst is a step in night flow from one night to the
//     next (the classic reading of minimum night flow). Each night's mean
//     residual over the quiet hours is compared with a robust baseline of
//     recent nights of the same kind (weekday or weekend): the median, with
//     the spread from the median absolute deviation (Hampel 1974; 1.4826 MAD
//     estimates sigma for normal data). Night values are nearly independent
//     from night to night, unlike 15-minute blocks within a night (lag-one
//     autocorrelation about 0.85 on real district data), so the test works
//     per night and needs no prewhitening. A suspected night is kept out of
//     the baseline (frozen), so a burst is never learnt as normal.
//   * Day path (fast). An hourly CUSUM (Page 1954) of each block against the
//     time-of-day profile of its kind of day (median of recent same-kind
//     days per bin), in units of the bin's spread of prediction errors,
//     prewhitened, on the log-likelihood ratio of a large step (day_step_m3_h)
//     against none, with its threshold from a declared false-alarm budget
//     (Siegmund 1985; see water.h). Daytime demand moves by far more than a
//     small burst, so only large steps are the day path's business.
// After an alarm the step is added to both baselines as the new normal, so
// that a later burst is a new step; the next whole night re-measures it,
// and the day path waits for that night (one burst, one alarm).
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
constexpr int kPendingBlocks = 64;      // blocks waiting for customer volume (64 h at hourly blocks)
constexpr int kNightRing = 64;          // usable nights remembered
constexpr double kMadToSigma = 1.4826;  // sigma / MAD for normal data (Hampel 1974)
constexpr double kWaterDensity_kg_m3 = 1000.0;  // nominal, to carry m3/s in the kg/s alarm evidence
}  // namespace

// --- Local time -------------------------------------------------------------

UtcOffsetSchedule UtcOffsetSchedule::Fixed(double offset_s) {
  UtcOffsetSchedule s;
  s.fixed_offset_s = offset_s;
  return s;
}

double UtcOffsetSchedule::OffsetAt(double utc_s) const {
  if (from_s.empty() || !(utc_s >= from_s.front())) return fixed_offset_s;
  const auto it = std::upper_bound(from_s.begin(), from_s.end(), utc_s);
  return offset_s[static_cast<size_t>(it - from_s.begin()) - 1];
}

bool UtcOffsetSchedule::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = "time zone: " + m; return false; };
  if (from_s.size() != offset_s.size()) return fail("transitions and offsets differ in number");
  if (!(std::fabs(fixed_offset_s) <= 14.0 * 3600.0)) return fail("utc offset must be within +-14 h");
  for (size_t i = 0; i < from_s.size(); ++i) {
    if (!std::isfinite(from_s[i]) || !(std::fabs(offset_s[i]) <= 26.0 * 3600.0))
      return fail("bad transition " + std::to_string(i));
    if (i > 0 && !(from_s[i] > from_s[i - 1])) return fail("transitions must be in time order");
  }
  return true;
}

int64_t LocalDayOf(double local_s) { return static_cast<int64_t>(std::floor(local_s / kSecondsPerDay)); }

int WeekdayOf(int64_t local_day) { return static_cast<int>(((local_day + 4) % 7 + 7) % 7); }

const char* BurstPathName(BurstPath p) {
  switch (p) {
    case BurstPath::kNight: return "night step";
    case BurstPath::kDay: return "day step";
    case BurstPath::kLearning: return "learning-period step";
  }
  return "?";
}

std::string BurstReport::ToString() const {
  char buf[256];
  std::snprintf(buf, sizeof buf, "burst (%s) at t=%.0f: %.2f +- %.2f m3/h, change at t=%.0f +- %.1f h, %.1f / %.1f sigmas",
                BurstPathName(path), time_s, size_m3_h, size_ci95_m3_h, change_s, change_ci_s / 3600.0, statistic,
                threshold);
  return buf;
}

std::string DistrictBlock::ToString() const {
  char buf[200];
  std::snprintf(buf, sizeof buf, "block t=%.0f %s zone %.3f customer %.3f residual %.3f profile %.3f sigma %.3f z %.2f",
                start_s, ok ? "ok" : "incomplete", zone_m3_h, customer_m3_h, residual_m3_h, profile_m3_h, sigma_m3_h, z);
  return buf;
}

// --- Options ------------------------------------------------------------------

bool DistrictMonitorOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = "district: " + m; return false; };
  if (!(block_s >= 300.0 && block_s <= 3600.0)) return fail("block must be 300..3600 s");
  const double bins = kSecondsPerDay / block_s;
  if (std::fabs(bins - std::round(bins)) > 1e-9) return fail("a day must be a whole number of blocks");
  if (!(filter_s > 0.0 && filter_s <= block_s)) return fail("filter time constant must be in (0, block] s");
  if (!offsets.IsValid(why)) return false;
  if (!(quiet_start_h >= 0.0 && quiet_start_h < 24.0 && quiet_end_h > 0.0 && quiet_end_h <= 24.0 &&
        quiet_start_h != quiet_end_h))
    return fail("quiet hours must lie in [0, 24] h and differ");
  const double quiet_len = quiet_end_h > quiet_start_h ? quiet_end_h - quiet_start_h : quiet_end_h + 24.0 - quiet_start_h;
  if (quiet_len > 12.0) return fail("quiet hours must be at most 12 h");
  if (quiet_len * kSecondsPerHour < block_s) return fail("quiet hours must hold at least one block");
  if (!(night_start_h >= 0.0 && night_end_h <= 24.0 && night_end_h > night_start_h))
    return fail("night window must satisfy 0 <= start < end <= 24 h");
  if (weekend_mask > 0x7Fu || weekend_mask == 0x7Fu) return fail("weekend days must leave at least one weekday");
  if (baseline_nights < 3 || baseline_nights > kNightRing) return fail("baseline nights must be 3..64");
  if (min_nights < 3 || min_nights > baseline_nights) return fail("min nights must be 3..baseline nights");
  if (!(night_alarm_sigmas > 0.0 && night_confirm_sigmas > 0.0 && suspect_sigmas > 0.0))
    return fail("night thresholds must be positive");
  if (!(night_confirm_sigmas <= night_alarm_sigmas && suspect_sigmas <= night_confirm_sigmas))
    return fail("night thresholds must satisfy suspect <= confirm <= alarm");
  if (!(min_step_m3_h >= 0.0 && min_sigma_m3_h > 0.0 && min_sigma_fraction >= 0.0 && min_sigma_fraction < 1.0))
    return fail("step and spread floors must be >= 0 (min sigma > 0)");
  if (accept_nights < 1 || accept_nights > 30) return fail("accept nights must be 1..30");
  if (profile_days < 3 || profile_days > 28) return fail("profile days must be 3..28");
  if (min_profile_days < 2 || min_profile_days > profile_days) return fail("min profile days must be 2..profile days");
  if (spread_days < 3 || spread_days > 56) return fail("spread days must be 3..56");
  if (!(day_step_m3_h > 0.0 && day_step_m3_h <= 1000.0)) return fail("day step must be in (0, 1000] m3/h");
  if (!(false_alarm_interval_days >= 1.0 && false_alarm_interval_days <= 1e6))
    return fail("false-alarm interval must be 1..1e6 days");
  if (day_persist_blocks < 1 || day_persist_blocks > 24) return fail("day persistence must be 1..24 blocks");
  if (!(day_phi_max >= 0.0 && day_phi_max < 1.0 && day_phi_prior >= 0.0 && day_phi_prior <= day_phi_max &&
        day_phi_prior_blocks >= 0.0))
    return fail("day phi: 0 <= prior <= max < 1, prior blocks >= 0");
  if (!(customer_wait_s >= 0.0 && customer_wait_s <= (kPendingBlocks - 2) * block_s))
    return fail("customer wait must be 0.." + std::to_string(static_cast<int>((kPendingBlocks - 2) * block_s)) + " s");
  if (!(min_valid_fraction > 0.0 && min_valid_fraction <= 1.0)) return fail("min valid fraction must be in (0, 1]");
  return alarm.IsValid(why);
}

std::string DistrictTick::ToString() const {
  char buf[200];
  std::snprintf(buf, sizeof buf, "t=%.0f %s in %.4f out %.4f storage %.1f m3 zone %.5f m3/s", time_s,
                valid ? "valid" : "invalid", inflow_m3_s, outflow_m3_s, storage_m3, zone_flow_m3_s);
  return buf;
}

// --- Monitor ------------------------------------------------------------------

bool DistrictMonitor::Init(int district, const DistrictMonitorOptions& options, bool has_customer_meters,
                           SequenceCounter* seq, AlarmEventSink* sink, std::string* why) {
  if (!options.IsValid(why)) return false;
  o_ = options;
  district_ = district;
  has_customer_ = has_customer_meters;
  bins_ = static_cast<int>(std::lround(kSecondsPerDay / o_.block_s));
  if (!alarm_.Init(district, AlarmType::kLeak, o_.alarm, seq, sink, why)) return false;
  tick_ = DistrictTick{};
  have_prev_ = started_ = have_open_ = false;
  cum_zone_m3_ = f_zone_ = prev_f_zone_ = prev_storage_ = 0.0;
  pending_.assign(kPendingBlocks, Pending{});
  pend_head_ = pend_n_ = 0;
  late_customer_ = 0;
  done_blocks_.assign(kPendingBlocks, DistrictBlock{});
  new_blocks_ = 0;
  night_done_ = burst_raised_ = alarm_pending_ = false;
  last_night_ = DistrictNight{};
  last_burst_ = BurstReport{};
  bursts_ = 0;
  prof_.assign(static_cast<size_t>(2 * bins_ * o_.profile_days), kNaN);
  prof_n_.assign(static_cast<size_t>(2 * bins_), 0);
  prof_head_.assign(static_cast<size_t>(2 * bins_), 0);
  err_.assign(static_cast<size_t>(2 * bins_ * o_.spread_days), kNaN);
  err_n_.assign(static_cast<size_t>(2 * bins_), 0);
  err_head_.assign(static_cast<size_t>(2 * bins_), 0);
  bin_sigma_.assign(static_cast<size_t>(2 * bins_), kNaN);
  cusum_ = 0.0;
  k_ = h_ = h_for_k_ = z_prev_ = kNaN;
  phi_ = o_.day_phi_prior;
  phi_sxy_ = o_.day_phi_prior * o_.day_phi_prior_blocks;
  phi_sxx_ = o_.day_phi_prior_blocks;
  run_start_s_ = run_sum_ = run_var_ = 0.0;
  run_ = rises_ = 0;
  acc_ = NightAcc{};
  night_x_.assign(kNightRing, 0.0);
  night_we_.assign(kNightRing, 0);
  night_end_s_.assign(kNightRing, 0.0);
  nights_head_ = nights_n_ = 0;
  learning_checked_ = false;
  suspect_run_ = low_run_ = 0;
  suspect_sum_ = low_sum_ = 0.0;
  prev_step_sigmas_ = prev_step_m3_h_ = 0.0;
  last_usable_end_s_ = kNaN;
  rebase_after_s_ = rebase_tolerance_m3_h_ = kNaN;
  run_first_excess_ = 0.0;
  scratch_.assign(static_cast<size_t>(std::max({kNightRing, 3 * o_.profile_days, 6 * o_.spread_days, 2 * bins_})), 0.0);
  scratch2_.assign(scratch_.size(), 0.0);
  return true;
}

double DistrictMonitor::Median(const double* v, int n) const {
  // Copies into scratch2_ (sized in Init) and partially sorts it.
  double* w = scratch2_.data();
  std::copy(v, v + n, w);
  std::nth_element(w, w + n / 2, w + n);
  const double hi = w[n / 2];
  if (n % 2 == 1) return hi;
  const double lo = *std::max_element(w, w + n / 2);
  return 0.5 * (lo + hi);
}

bool DistrictMonitor::InQuiet(double hour) const {
  if (o_.quiet_start_h < o_.quiet_end_h) return hour >= o_.quiet_start_h - 1e-9 && hour < o_.quiet_end_h - 1e-9;
  return hour >= o_.quiet_start_h - 1e-9 || hour < o_.quiet_end_h - 1e-9;
}

bool DistrictMonitor::InWindow(double hour) const {
  return hour >= o_.night_start_h - 1e-9 && hour < o_.night_end_h - 1e-9;
}

double DistrictMonitor::profile_m3_h(int kind, int bin) const {
  if (kind < 0 || kind > 1 || bin < 0 || bin >= bins_) return kNaN;
  const int pb = kind * bins_ + bin;
  const int n = prof_n_[pb];
  if (n < o_.min_profile_days) return kNaN;
  return Median(&prof_[static_cast<size_t>(pb) * o_.profile_days], n);
}

DistrictMonitor::Pending* DistrictMonitor::Block(double start_s) {
  // Blocks already decided are gone.
  if (pend_n_ > 0 && start_s < pending_[pend_head_].start_s - 1e-6) return nullptr;
  if (have_open_ && start_s <= open_start_s_ + 1e-6) {
    for (int i = pend_n_ - 1; i >= 0; --i) {
      Pending& p = pending_[(pend_head_ + i) % kPendingBlocks];
      if (std::fabs(p.start_s - start_s) < 1e-6) return &p;
    }
    return nullptr;
  }
  // Open every block up to this one (blocks skipped by a long gap are
  // opened empty and will be incomplete).
  double s = have_open_ ? open_start_s_ + o_.block_s : start_s;
  if (start_s - s > kPendingBlocks * o_.block_s) s = start_s - (kPendingBlocks - 1) * o_.block_s;
  for (; s <= start_s + 1e-6; s += o_.block_s) OpenBlock(s);
  return &pending_[(pend_head_ + pend_n_ - 1) % kPendingBlocks];
}

void DistrictMonitor::OpenBlock(double start_s) {
  if (pend_n_ == kPendingBlocks) {
    // The oldest block has waited too long: decide it now.
    Decide(pending_[pend_head_], start_s);
    pend_head_ = (pend_head_ + 1) % kPendingBlocks;
    --pend_n_;
  }
  Pending& p = pending_[(pend_head_ + pend_n_) % kPendingBlocks];
  p = Pending{};
  p.start_s = start_s;
  ++pend_n_;
  open_start_s_ = start_s;
  have_open_ = true;
}

void DistrictMonitor::Step(double t, double dt, bool valid, double inflow_m3_s, double outflow_m3_s,
                           double storage_m3) {
  new_blocks_ = 0;
  night_done_ = false;
  burst_raised_ = false;
  // Not a time, or time running backwards: ignored.
  if (!std::isfinite(t) || std::fabs(t) > 1e12 || (started_ && t < tick_.time_s)) return;
  valid = valid && std::isfinite(inflow_m3_s) && std::isfinite(outflow_m3_s) && std::isfinite(storage_m3) &&
          std::isfinite(dt) && dt > 0.0 && dt < 1e7;
  started_ = true;
  if (valid) {
    // Sample and hold: the flows read at the previous tick held over
    // (t - dt, t]; the storage change between the two ticks.
    if (have_prev_) cum_zone_m3_ += (prev_in_m3_s_ - prev_out_m3_s_) * dt - (storage_m3 - prev_storage_);
    prev_storage_ = storage_m3;
    prev_in_m3_s_ = inflow_m3_s;
    prev_out_m3_s_ = outflow_m3_s;
  }
  const bool counted = valid && have_prev_;  // the first valid tick after a gap only re-baselines
  have_prev_ = valid;
  prev_f_zone_ = f_zone_;
  // The filter stands still through a gap, so that it resumes with the lag
  // it had.
  if (valid) f_zone_ += (1.0 - std::exp(-dt / o_.filter_s)) * (cum_zone_m3_ - f_zone_);
  tick_.time_s = t;
  tick_.valid = valid;
  tick_.inflow_m3_s = inflow_m3_s;
  tick_.outflow_m3_s = outflow_m3_s;
  tick_.storage_m3 = storage_m3;
  tick_.zone_flow_m3_s = valid && dt > 0.0 ? (f_zone_ - prev_f_zone_) / dt : kNaN;

  // This tick's volume belongs to the interval (t - dt, t]: the block of t - dt/2.
  if (std::isfinite(dt) && dt > 0.0 && dt < 1e7) {
    const double mid = t - 0.5 * dt;
    const double start = std::floor(mid / o_.block_s) * o_.block_s;
    if (Pending* p = Block(start)) {
      p->zone_s += dt;
      if (counted) {
        p->zone_m3 += f_zone_ - prev_f_zone_;
        p->zone_valid_s += dt;
      }
    }
  }
  DecideReady(t);

  // The alarm's condition is one tick long per detected burst.
  AlarmEvidence ev;
  ev.leak_rate_kg_s = last_burst_.size_m3_h / kSecondsPerHour * kWaterDensity_kg_m3;
  ev.statistic = last_burst_.statistic;
  ev.threshold = last_burst_.threshold;
  ev.window_s = t - last_burst_.change_s;
  ev.SetDetail(BurstPathName(last_burst_.path));
  alarm_.Update(t, alarm_pending_, ev);
  alarm_pending_ = false;
}

void DistrictMonitor::AddCustomerVolume(double t0, double t1, double volume_m3) {
  if (!has_customer_ || !std::isfinite(t0) || !std::isfinite(t1) || !std::isfinite(volume_m3) || !(t1 > t0) ||
      t1 - t0 > o_.block_s * 24.0 || (have_open_ && t1 > open_start_s_ + 4.0 * o_.block_s)) {
    ++late_customer_;
    return;
  }
  const double rate = volume_m3 / (t1 - t0);
  // The zone volume comes through the first-order filter, which delays a
  // smoothly varying flow by its time constant (the steady lag of a first-
  // order filter behind a ramp). Customer volumes are moved by the same
  // delay, so that the morning rise does not show as a residual.
  t0 += o_.filter_s;
  t1 += o_.filter_s;
  // Spread over the blocks the interval covers (opening blocks ahead of the
  // zone meters when the delay takes it there).
  bool late = false;
  for (double bs = std::floor(t0 / o_.block_s) * o_.block_s; bs < t1 - 1e-6; bs += o_.block_s) {
    Pending* p = Block(bs);
    if (p == nullptr) {
      late = true;
      continue;
    }
    const double a = std::max(t0, p->start_s), b = std::min(t1, p->start_s + o_.block_s);
    if (b > a) {
      p->cust_m3 += rate * (b - a);
      p->cust_s += b - a;
    }
  }
  if (late) ++late_customer_;
}

void DistrictMonitor::DecideReady(double t) {
  while (pend_n_ > 0) {
    const Pending& p = pending_[pend_head_];
    const double end = p.start_s + o_.block_s;
    if (t < end - 1e-6) break;  // still filling
    const bool cust_done = !has_customer_ || p.cust_s >= o_.block_s * 0.999;
    if (!cust_done && t < end + o_.customer_wait_s) break;
    Decide(p, t);
    pend_head_ = (pend_head_ + 1) % kPendingBlocks;
    --pend_n_;
  }
}

void DistrictMonitor::Decide(const Pending& p, double t) {
  DistrictBlock b;
  b.start_s = p.start_s;
  const bool cust_ok = !has_customer_ || p.cust_s >= o_.block_s * 0.999;
  b.ok = p.zone_valid_s >= o_.min_valid_fraction * o_.block_s && cust_ok;
  b.zone_m3_h = p.zone_valid_s > 0.0 ? p.zone_m3 / p.zone_valid_s * kSecondsPerHour : kNaN;
  b.customer_m3_h = has_customer_ && p.cust_s > 0.0 ? p.cust_m3 / p.cust_s * kSecondsPerHour : kNaN;
  b.residual_m3_h = has_customer_ ? b.zone_m3_h - b.customer_m3_h : b.zone_m3_h;
  if (!std::isfinite(b.residual_m3_h)) b.ok = false;

  const double local = o_.offsets.Local(p.start_s);
  const int64_t day = LocalDayOf(local);
  const double hour = (local - static_cast<double>(day) * kSecondsPerDay) / kSecondsPerHour;
  const int bin = std::clamp(static_cast<int>(std::floor(hour * kSecondsPerHour / o_.block_s + 1e-9)), 0, bins_ - 1);
  const int kind = Weekend(day) ? 1 : 0;
  DayPath(b, kind, bin, t);
  b.profile_m3_h = profile_m3_h(kind, bin);
  b.cusum = cusum_;
  if (new_blocks_ < kPendingBlocks) done_blocks_[new_blocks_++] = b;

  // Nights: the night a quiet block belongs to is the date its quiet hours end on.
  const bool quiet = InQuiet(hour);
  const bool window = InWindow(hour);
  if (!quiet && !window) {
    // A block outside both windows after a night's blocks closes that night.
    if (acc_.day != INT64_MIN) FinishNight(t);
    return;
  }
  int64_t night_day = day;
  if (quiet && o_.quiet_start_h > o_.quiet_end_h && hour >= o_.quiet_start_h - 1e-9) night_day = day + 1;
  if (acc_.day != INT64_MIN && acc_.day != night_day) FinishNight(t);
  if (acc_.day == INT64_MIN) {
    acc_ = NightAcc{};
    acc_.day = night_day;
  }
  if (quiet) {
    if (acc_.quiet_n == 0) acc_.quiet_first_s = p.start_s;
    ++acc_.quiet_n;
    acc_.quiet_end_s = p.start_s + o_.block_s;
    if (b.ok) {
      ++acc_.quiet_ok;
      acc_.quiet_sum += b.residual_m3_h;
    }
  }
  if (window) {
    ++acc_.win_n;
    if (b.ok) {
      ++acc_.win_ok;
      acc_.win_zone += b.zone_m3_h;
      if (has_customer_) acc_.win_cust += b.customer_m3_h;
    }
  }
  // Close the night at the last block of both windows.
  const double end_h = hour + o_.block_s / kSecondsPerHour;
  const double last_h = std::max(o_.quiet_end_h, o_.night_end_h);
  if (end_h >= last_h - 1e-9 || (end_h >= o_.quiet_end_h - 1e-9 && end_h >= o_.night_end_h - 1e-9)) FinishNight(t);
}

// --- Day path -------------------------------------------------------------------

double DayPathThreshold(double false_alarm_interval_days, double blocks_per_day, double k) {
  if (!(false_alarm_interval_days > 0.0 && blocks_per_day > 0.0 && k > 0.0)) return kNaN;
  return CusumThresholdForArl(false_alarm_interval_days * blocks_per_day, k, /*markov=*/false);
}

void DistrictMonitor::UpdateBinSigma(int kind, int bin) {
  // 1.4826 x the median absolute prediction error of the bin and its two
  // neighbours of the same kind of day (Hampel 1974). While that kind has
  // fewer than kMinSpreadErrors, the other kind's errors of the same bins
  // are pooled in (weekends come two days a week, and the MAD of a few
  // values is often far too small).
  constexpr int kMinSpreadErrors = 15;
  int m = 0;
  auto gather = [&](int kd) {
    for (int k = -1; k <= 1; ++k) {
      const int bb = kd * bins_ + ((bin + k) % bins_ + bins_) % bins_;
      const double* rb = &err_[static_cast<size_t>(bb) * o_.spread_days];
      for (int i = 0; i < err_n_[bb]; ++i) scratch_[m++] = std::fabs(rb[i]);
    }
  };
  gather(kind);
  if (m < kMinSpreadErrors) gather(1 - kind);
  const int pb = kind * bins_ + bin;
  if (m < kMinSpreadErrors) {
    bin_sigma_[pb] = kNaN;
    return;
  }
  // Taken at its upper one-standard-error bound: the MAD's asymptotic
  // efficiency at the normal is 37 % (Rousseeuw & Croux 1993; from memory),
  // so sd(sigma_hat) / sigma = 1 / sqrt(2 x 0.367 m) = 1.167 / sqrt(m). A
  // spread from few errors is otherwise often far too small, and the CUSUM
  // takes it as known.
  const double upper = 1.0 + 1.167 / std::sqrt(static_cast<double>(m));
  bin_sigma_[pb] = std::max(kMadToSigma * Median(scratch_.data(), m) * upper, o_.min_sigma_m3_h);
}

void DistrictMonitor::UpdateReference() {
  // The reference: k = mu_ref / 2, mu_ref the target step in prewhitened
  // spreads at the median spread over the formed bins of both kinds. The
  // threshold in log-likelihood-ratio units is A = mu_ref h(k), h from the
  // budget (the LLR CUSUM at a constant spread is mu times the plain one);
  // recomputed when k has moved by 1 %.
  int m = 0;
  for (int i = 0; i < 2 * bins_; ++i)
    if (std::isfinite(bin_sigma_[i])) scratch_[m++] = bin_sigma_[i];
  if (m < bins_ / 2) return;  // the spreads have not formed over half a day yet
  const double sigma_ref = Median(scratch_.data(), m);
  k_ = o_.day_step_m3_h / (2.0 * sigma_ref) * std::sqrt((1.0 - phi_) / (1.0 + phi_));
  if (!std::isfinite(h_for_k_) || std::fabs(k_ - h_for_k_) > 0.01 * h_for_k_) {
    h_ = 2.0 * k_ * DayPathThreshold(o_.false_alarm_interval_days, static_cast<double>(bins_), k_);
    h_for_k_ = k_;
  }
}

void DistrictMonitor::DayPath(DistrictBlock& b, int kind, int bin, double t) {
  const int pb = kind * bins_ + bin;
  double* ring = &prof_[static_cast<size_t>(pb) * o_.profile_days];
  const int n = prof_n_[pb];
  if (!b.ok) {
    z_prev_ = kNaN;  // an incomplete block neither decides nor learns (the CUSUM holds)
    return;
  }
  // A kind of day whose bin has not formed yet (weekends come two days a
  // week) borrows the other kind's median and spread: the residual (zone
  // minus metered use) differs little between kinds, unlike the zone flow.
  const int other = (1 - kind) * bins_ + bin;
  double med = kNaN;
  bool borrowed = false;
  if (n >= o_.min_profile_days) {
    med = Median(ring, n);
  } else if (prof_n_[other] >= o_.min_profile_days) {
    med = Median(&prof_[static_cast<size_t>(other) * o_.profile_days], prof_n_[other]);
    borrowed = true;
  }
  const bool waiting = std::isfinite(rebase_after_s_);
  if (std::isfinite(med) && !waiting) {
    // The prediction error enters the bin's spread (all of them, so that the
    // spread is not truncated; the median absolute error ignores a burst's
    // few hours).
    double* er = &err_[static_cast<size_t>(pb) * o_.spread_days];
    er[err_head_[pb]] = b.residual_m3_h - med;
    err_head_[pb] = (err_head_[pb] + 1) % o_.spread_days;
    err_n_[pb] = std::min(err_n_[pb] + 1, o_.spread_days);
  }
  // A borrowed median is a worse prediction (the residual does differ
  // between kinds: weekend use is higher and later): its spread is doubled.
  const double sigma =
      (std::isfinite(bin_sigma_[pb]) ? bin_sigma_[pb] : bin_sigma_[other]) * (borrowed ? 2.0 : 1.0);
  if (std::isfinite(med) && std::isfinite(sigma)) {
    b.sigma_m3_h = sigma;
    b.z = (b.residual_m3_h - med) / sigma;
  }
  const bool have_z = std::isfinite(med) && std::isfinite(sigma) && !waiting;
  // Prewhitening (AR(1)): e = (z - phi z_prev) / sqrt(1 - phi^2), plain z
  // after a gap. phi from the z series (lag-one sums, with the prior).
  double e = b.z;
  if (have_z && std::isfinite(z_prev_)) {
    e = (b.z - phi_ * z_prev_) / std::sqrt(1.0 - phi_ * phi_);
    // Clipped at 4 spreads, so that a burst's few hours do not inflate phi.
    const double zc = std::clamp(b.z, -4.0, 4.0), zp = std::clamp(z_prev_, -4.0, 4.0);
    phi_sxy_ += zc * zp;
    phi_sxx_ += zp * zp;
    phi_ = std::clamp(phi_sxy_ / phi_sxx_, 0.0, o_.day_phi_max);
  }
  z_prev_ = have_z ? b.z : kNaN;
  const bool decide = have_z && std::isfinite(k_) && std::isfinite(h_);
  if (decide) {
    // Page (1954) CUSUM on the log-likelihood ratio of "a step of
    // day_step_m3_h" against "none" for this block: in prewhitened spreads
    // the step shows as mu = day_step / sigma x sqrt((1 - phi) / (1 + phi)),
    // and the LLR of e ~ N(mu, 1) against N(0, 1) is mu (e - mu / 2). A
    // small deviation in a quiet hour (small spread) is evidence against a
    // large step, not for it.
    const double mu = o_.day_step_m3_h / sigma * std::sqrt((1.0 - phi_) / (1.0 + phi_));
    const double s_new = std::max(0.0, cusum_ + mu * (e - 0.5 * mu));
    if (s_new > 0.0) {
      if (cusum_ <= 0.0) {
        run_start_s_ = b.start_s;
        run_ = rises_ = 0;
        run_sum_ = run_var_ = 0.0;
      }
      ++run_;
      rises_ = s_new > cusum_ ? rises_ + 1 : 0;
      if (run_ == 1) run_first_excess_ = b.residual_m3_h - med;
      run_sum_ += b.residual_m3_h - med;
      run_var_ += sigma * sigma;
    } else {
      run_ = rises_ = 0;
    }
    cusum_ = s_new;
    if (cusum_ > h_ && rises_ >= o_.day_persist_blocks) {
      BurstReport r;
      r.time_s = t;
      r.path = BurstPath::kDay;
      // The size: the excursion's mean excess over the profile, without its
      // first block (the burst usually starts inside it) when there are more.
      const int nb = run_ > 1 ? run_ - 1 : run_;
      r.size_m3_h = (run_ > 1 ? run_sum_ - run_first_excess_ : run_sum_) / nb;
      r.size_ci95_m3_h = kZ95 * std::sqrt(run_var_ / run_) / std::sqrt(static_cast<double>(nb));  // blocks are correlated: a rough limit
      // The change: at the start of the excursion, within its first block
      // (or earlier, when the step started below k).
      r.change_s = run_start_s_;
      r.change_ci_s = o_.block_s;
      r.statistic = cusum_;
      r.threshold = h_;
      Raise(r);
      ShiftBaselines(r.size_m3_h);
      // The first whole night after the change re-measures the step instead
      // of testing it again (and corrects both baselines); until then the
      // day path waits.
      rebase_after_s_ = run_start_s_;
      // A day estimate comes from a few hours at daytime pressure and is
      // often well below the step (a 6.3 m3/h burst read as 3.7): only a
      // night more than twice as far above the old level, or beyond the
      // estimate's interval, has a second step in it.
      rebase_tolerance_m3_h_ = std::max(r.size_ci95_m3_h, r.size_m3_h);
      return;  // the shifted profile already holds the new level
    }
  }
  // Learn the bin unless a step is suspected: the CUSUM above zero, the
  // block above suspect_sigmas, or a night step pending (frozen).
  const bool suspect = (std::isfinite(b.sigma_m3_h) && b.z > o_.suspect_sigmas) || cusum_ > 0.0 || suspect_run_ > 0;
  if (!suspect) {
    ring[prof_head_[pb]] = b.residual_m3_h;
    prof_head_[pb] = (prof_head_[pb] + 1) % o_.profile_days;
    prof_n_[pb] = std::min(n + 1, o_.profile_days);
  }
  UpdateBinSigma(kind, bin);
  UpdateBinSigma(kind, (bin + 1) % bins_);
  UpdateBinSigma(kind, (bin + bins_ - 1) % bins_);
  UpdateReference();
}

void DistrictMonitor::ShiftBaselines(double step) {
  if (!std::isfinite(step)) return;
  for (int i = 0; i < 2 * bins_; ++i)
    for (int k = 0; k < prof_n_[i]; ++k) prof_[static_cast<size_t>(i) * o_.profile_days + k] += step;
  for (int i = 0; i < nights_n_; ++i) night_x_[(nights_head_ + i) % kNightRing] += step;
  suspect_run_ = low_run_ = 0;
  suspect_sum_ = low_sum_ = 0.0;
  prev_step_sigmas_ = 0.0;
  cusum_ = 0.0;
  run_ = rises_ = 0;
}

void DistrictMonitor::Raise(const BurstReport& r) {
  last_burst_ = r;
  burst_raised_ = true;
  alarm_pending_ = true;
  ++bursts_;
}

// --- Night path -------------------------------------------------------------------

void DistrictMonitor::FinishNight(double t) {
  DistrictNight n;
  n.local_day = acc_.day;
  n.weekend = Weekend(acc_.day);
  n.quiet_end_s = acc_.quiet_end_s;
  n.usable = acc_.quiet_n > 0 && acc_.quiet_ok >= 0.75 * acc_.quiet_n && acc_.quiet_ok > 0;
  n.quiet_residual_m3_h = acc_.quiet_ok > 0 ? acc_.quiet_sum / acc_.quiet_ok : kNaN;
  if (acc_.win_ok > 0 && acc_.win_ok >= 0.75 * acc_.win_n) {
    n.window_zone_m3_h = acc_.win_zone / acc_.win_ok;
    if (has_customer_) n.window_customer_m3_h = acc_.win_cust / acc_.win_ok;
  }
  acc_ = NightAcc{};
  if (n.usable) NightPath(&n, t);
  last_night_ = n;
  night_done_ = true;
}

void DistrictMonitor::NightPath(DistrictNight* n, double t) {
  const double x = n->quiet_residual_m3_h;
  const uint8_t we = n->weekend ? 1 : 0;
  auto at = [&](int i) { return (nights_head_ + i) % kNightRing; };  // i = 0 oldest
  auto push = [&](double v, uint8_t w, double end_s) {
    if (nights_n_ == kNightRing) {
      nights_head_ = (nights_head_ + 1) % kNightRing;
      --nights_n_;
    }
    const int k = at(nights_n_);
    night_x_[k] = v;
    night_we_[k] = w;
    night_end_s_[k] = end_s;
    ++nights_n_;
  };
  // Baseline for a night of kind `w` from the last baseline_nights nights:
  // the same kind's median when it has 3 or more, else the pooled median.
  auto baseline = [&](uint8_t w, double* sigma) {
    const int first = std::max(0, nights_n_ - o_.baseline_nights);
    int m_all = 0, m_kind = 0;
    for (int i = first; i < nights_n_; ++i) {
      scratch_[m_all++] = night_x_[at(i)];
    }
    const double pooled = Median(scratch_.data(), m_all);
    double kind_med[2] = {pooled, pooled};
    for (uint8_t k = 0; k < 2; ++k) {
      int m = 0;
      for (int i = first; i < nights_n_; ++i)
        if (night_we_[at(i)] == k) scratch_[m++] = night_x_[at(i)];
      if (m >= 3) kind_med[k] = Median(scratch_.data(), m);
      if (k == w) m_kind = m;
    }
    (void)m_kind;
    int m = 0;
    for (int i = first; i < nights_n_; ++i) scratch_[m++] = std::fabs(night_x_[at(i)] - kind_med[night_we_[at(i)]]);
    const double mad = Median(scratch_.data(), m);
    const double nn = static_cast<double>(m);
    *sigma = std::max({kMadToSigma * mad * nn / std::max(nn - 1.0, 1.0), o_.min_sigma_m3_h,
                       o_.min_sigma_fraction * std::fabs(kind_med[w])});
    return kind_med[w];
  };

  // After a day-path alarm: the first night that starts after the change
  // re-measures the step (no test), and nights before it are skipped.
  if (std::isfinite(rebase_after_s_)) {
    const double night_start = n->quiet_end_s - (o_.quiet_end_h > o_.quiet_start_h
                                                     ? o_.quiet_end_h - o_.quiet_start_h
                                                     : o_.quiet_end_h + 24.0 - o_.quiet_start_h) * kSecondsPerHour;
    if (night_start < rebase_after_s_) return;  // partly before the change: neither learnt nor tested
    if (nights_n_ >= o_.min_nights) {
      double sigma = 0.0;
      const double base = baseline(we, &sigma);
      const double corr = x - base;
      const double allow = std::max({o_.night_alarm_sigmas * sigma, o_.min_step_m3_h, rebase_tolerance_m3_h_});
      if (std::isfinite(rebase_tolerance_m3_h_) && corr > allow) {
        // Tonight is above the day alarm's step by more than that step's
        // uncertainty: a new step on top of it, alarmed as a night step.
        BurstReport r;
        r.time_s = t;
        r.path = BurstPath::kNight;
        r.size_m3_h = corr;
        r.size_ci95_m3_h = kZ95 * sigma * std::sqrt(2.0);
        r.change_s = 0.5 * (rebase_after_s_ + n->quiet_end_s);
        r.change_ci_s = 0.5 * (n->quiet_end_s - rebase_after_s_);
        r.statistic = corr / sigma;
        r.threshold = allow / sigma;
        Raise(r);
        n->alarm = true;
        n->baseline_m3_h = base;
        n->sigma_m3_h = sigma;
        n->step_m3_h = corr;
        ShiftBaselines(corr);
        rebase_after_s_ = n->quiet_end_s;
        rebase_tolerance_m3_h_ = kNaN;
        push(x, we, n->quiet_end_s);
        last_usable_end_s_ = n->quiet_end_s;
        return;
      }
      for (int i = 0; i < nights_n_; ++i) night_x_[at(i)] += corr;
      for (int i = 0; i < 2 * bins_; ++i)
        for (int k = 0; k < prof_n_[i]; ++k) prof_[static_cast<size_t>(i) * o_.profile_days + k] += corr;
      n->baseline_m3_h = base + corr;
      n->sigma_m3_h = sigma;
      n->step_m3_h = 0.0;
    }
    rebase_after_s_ = rebase_tolerance_m3_h_ = kNaN;
    push(x, we, n->quiet_end_s);
    last_usable_end_s_ = n->quiet_end_s;
    return;
  }

  if (!learning_checked_) {
    push(x, we, n->quiet_end_s);
    last_usable_end_s_ = n->quiet_end_s;
    if (nights_n_ < o_.min_nights) return;
    learning_checked_ = true;
    // A burst in the learning period: the split of the learning nights with
    // the largest rise of the median, tested like a confirmed step (both
    // sides' spread from their own MAD).
    const int m = nights_n_;
    double best = 0.0, best_sig = 1.0;
    int best_k = -1;
    for (int k = 2; k <= m - 2; ++k) {
      int a = 0;
      for (int i = 0; i < k; ++i) scratch_[a++] = night_x_[at(i)];
      const double mb = Median(scratch_.data(), a);
      a = 0;
      for (int i = k; i < m; ++i) scratch_[a++] = night_x_[at(i)];
      const double ma = Median(scratch_.data(), a);
      a = 0;
      for (int i = 0; i < m; ++i) scratch_[a++] = std::fabs(night_x_[at(i)] - (i < k ? mb : ma));
      const double sig = std::max({kMadToSigma * Median(scratch_.data(), a) * m / (m - 2.0), o_.min_sigma_m3_h,
                                   o_.min_sigma_fraction * std::fabs(mb)});
      if ((ma - mb) / sig > best / best_sig) {
        best = ma - mb;
        best_sig = sig;
        best_k = k;
      }
    }
    if (best_k > 0 && best > o_.min_step_m3_h && best / best_sig > o_.night_alarm_sigmas) {
      BurstReport r;
      r.time_s = t;
      r.path = BurstPath::kLearning;
      r.size_m3_h = best;
      r.size_ci95_m3_h = kZ95 * best_sig * std::sqrt(2.0 / 3.0);
      const double e0 = night_end_s_[at(best_k - 1)], e1 = night_end_s_[at(best_k)];
      r.change_s = 0.5 * (e0 + e1);
      r.change_ci_s = 0.5 * (e1 - e0);
      r.statistic = best / best_sig;
      r.threshold = o_.night_alarm_sigmas;
      for (int i = 0; i < best_k; ++i) night_x_[at(i)] += best;
      // The profile learnt before the step moves with it.
      for (int i = 0; i < 2 * bins_; ++i)
        for (int k = 0; k < prof_n_[i]; ++k) prof_[static_cast<size_t>(i) * o_.profile_days + k] += best;
      Raise(r);
      n->alarm = true;
      n->step_m3_h = best;
      rebase_after_s_ = n->quiet_end_s;
      rebase_tolerance_m3_h_ = kNaN;
      cusum_ = 0.0;
    }
    return;
  }

  double sigma = 0.0;
  const double base = baseline(we, &sigma);
  const double d = x - base;
  const double zs = d / sigma;
  n->baseline_m3_h = base;
  n->sigma_m3_h = sigma;
  n->step_m3_h = d;
  const bool one = zs > o_.night_alarm_sigmas && d > o_.min_step_m3_h;
  const bool two = zs > o_.night_confirm_sigmas && d > o_.min_step_m3_h && prev_step_sigmas_ > o_.night_confirm_sigmas &&
                   prev_step_m3_h_ > o_.min_step_m3_h;
  if (one || two) {
    BurstReport r;
    r.time_s = t;
    r.path = BurstPath::kNight;
    r.size_m3_h = two && !one ? 0.5 * (d + prev_step_m3_h_) : d;
    r.size_ci95_m3_h = kZ95 * sigma * std::sqrt(1.0 + 1.0 / std::max(1, std::min(nights_n_, o_.baseline_nights)));
    // The change lies between the end of the last night before the step and
    // the start of the first night after it.
    const double quiet_len_s = (o_.quiet_end_h > o_.quiet_start_h ? o_.quiet_end_h - o_.quiet_start_h
                                                                   : o_.quiet_end_h + 24.0 - o_.quiet_start_h) *
                               kSecondsPerHour;
    double after_s = n->quiet_end_s;  // a step inside tonight's hours is possible
    double before_s = std::isfinite(last_usable_end_s_) ? last_usable_end_s_ : n->quiet_end_s - kSecondsPerDay;
    if (two && !one) {
      after_s -= kSecondsPerDay;
      before_s -= kSecondsPerDay;
    }
    before_s = std::min(before_s, after_s - quiet_len_s);
    r.change_s = 0.5 * (before_s + after_s);
    r.change_ci_s = 0.5 * (after_s - before_s);
    r.statistic = zs;
    r.threshold = one ? o_.night_alarm_sigmas : o_.night_confirm_sigmas;
    Raise(r);
    n->alarm = true;
    // The step becomes the new normal: the baseline nights move up by it.
    ShiftBaselines(r.size_m3_h);
    // One burst, one alarm: the next whole night re-measures the step
    // (the burst may have started inside tonight's quiet hours, so tonight
    // saw only part of it) and the day path waits for it.
    rebase_after_s_ = n->quiet_end_s;
    rebase_tolerance_m3_h_ = kNaN;
    push(x, we, n->quiet_end_s);
    last_usable_end_s_ = n->quiet_end_s;
    return;
  }
  prev_step_sigmas_ = zs;
  prev_step_m3_h_ = d;
  if (zs > o_.suspect_sigmas) {
    // Frozen: kept out of the baseline. After accept_nights in a row without
    // an alarm, the level is the new normal (a slow rise, not a burst).
    n->suspect = true;
    ++suspect_run_;
    suspect_sum_ += d;
    if (suspect_run_ >= o_.accept_nights) {
      const double shift = suspect_sum_ / suspect_run_;
      for (int i = 0; i < nights_n_; ++i) night_x_[at(i)] += shift;
      suspect_run_ = 0;
      suspect_sum_ = 0.0;
      push(x, we, n->quiet_end_s);
    }
    last_usable_end_s_ = n->quiet_end_s;
    return;
  }
  suspect_run_ = 0;
  suspect_sum_ = 0.0;
  if (zs < -o_.suspect_sigmas) {
    // A fall (a repair, a change of valves): after accept_nights the lower
    // level is the new normal.
    ++low_run_;
    low_sum_ += d;
    if (low_run_ >= o_.accept_nights) {
      const double shift = low_sum_ / low_run_;
      for (int i = 0; i < nights_n_; ++i) night_x_[at(i)] += shift;
      for (int i = 0; i < 2 * bins_; ++i)
        for (int k = 0; k < prof_n_[i]; ++k) prof_[static_cast<size_t>(i) * o_.profile_days + k] += shift;
      low_run_ = 0;
      low_sum_ = 0.0;
      push(x, we, n->quiet_end_s);
    }
    last_usable_end_s_ = n->quiet_end_s;
    return;
  }
  low_run_ = 0;
  low_sum_ = 0.0;
  push(x, we, n->quiet_end_s);
  last_usable_end_s_ = n->quiet_end_s;
}

}  // namespace holdfast::water
