// Minimum night flow analysis: MNF per local night, legitimate night use,
// night leakage, daily leakage through the hour-day factor, and change and
// trend across nights. See holdfast/water.h.
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <string>

#include "holdfast/water.h"

namespace holdfast::water {
namespace {
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// A night counts when at least this fraction of its window had valid samples,
// and the HDF needs at least this many of the day's hours.
constexpr double kMinWindowFraction = 0.5;
constexpr int kMinHdfHours = 20;
}  // namespace

bool NightFlowOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = "night flow: " + m; return false; };
  if (!offsets.IsValid(why)) return false;
  if (!(window_start_h >= 0.0 && window_end_h <= 24.0 && window_end_h > window_start_h))
    return fail("the night window must satisfy 0 <= start < end <= 24 h");
  if (!(step_s > 0.0 && step_s <= 3600.0)) return fail("step must be in (0, 3600] s");
  if (!(averaging_s >= step_s && averaging_s <= (window_end_h - window_start_h) * 3600.0))
    return fail("averaging span must be at least one step and no longer than the window");
  if (averaging_s / step_s > 1e5) return fail("averaging span has too many steps (> 100000)");
  if (!(household_l_per_property_h >= 0.0) || !(person_l_per_h >= 0.0) || !(non_household_l_per_property_h >= 0.0) ||
      !(exceptional_night_use_m3_h >= 0.0))
    return fail("night-use rates must not be negative");
  if (!(n1 >= 0.0 && n1 <= 3.0)) return fail("N1 must be in [0, 3]");
  if (baseline_nights < 2 || baseline_nights > 365) return fail("baseline_nights must be 2..365");
  if (!(cusum_k_sigmas >= 0.0) || !(cusum_h_sigmas > 0.0)) return fail("CUSUM k >= 0 and h > 0");
  if (!(min_sigma_m3_h > 0.0)) return fail("min_sigma must be positive");
  if (trend_nights < 3 || trend_nights > 365) return fail("trend_nights must be 3..365");
  return true;
}

std::string NightResult::ToString() const {
  char buf[320];
  std::snprintf(buf, sizeof buf,
                "night day %lld: MNF %.3f m3/h at AZNP %.2f m; legitimate %.3f m3/h; night leakage %.3f m3/h; "
                "HDF %.2f h; daily leakage %.1f m3; cusum %.2f%s; trend %.4f m3/h/day",
                static_cast<long long>(local_day), mnf_m3_h, night_pressure_head_m, legitimate_night_use_m3_h,
                night_leakage_m3_h, hdf_h, daily_leakage_m3, cusum, change ? " CHANGE" : "", trend_m3_h_per_day);
  return buf;
}

bool NightFlowAnalyzer::Init(const NightFlowOptions& options, const DistrictProperties& p, std::string* why) {
  if (!options.IsValid(why)) return false;
  if (!(p.households >= 0.0) || !(p.non_households >= 0.0) || !(p.population >= 0.0)) {
    if (why) *why = "night flow: property counts must not be negative";
    return false;
  }
  if (options.per_person && !(p.population > 0.0)) {
    if (why) *why = "night flow: per-person night use needs a population";
    return false;
  }
  o_ = options;
  // Legitimate night use (common practice; rates from the options).
  const double household_l_h =
      o_.per_person ? o_.person_l_per_h * p.population : o_.household_l_per_property_h * p.households;
  legit_m3_h_ = (household_l_h + o_.non_household_l_per_property_h * p.non_households) / 1000.0 +
                o_.exceptional_night_use_m3_h;
  ring_n_ = std::max(1, static_cast<int>(std::lround(o_.averaging_s / o_.step_s)));
  ring_q_.assign(ring_n_, 0.0);
  ring_p_.assign(ring_n_, 0.0);
  ring_ok_.assign(ring_n_, 0);
  ring_head_ = ring_filled_ = ring_valid_ = 0;
  sum_q_ = sum_p_ = 0.0;
  have_day_ = false;
  day_closed_ = false;
  hour_p_.fill(0.0);
  hour_n_.fill(0);
  hour_id_.fill(INT64_MIN);
  nights_ = 0;
  base_sum_ = base_sum2_ = base_mean_ = base_sigma_ = cusum_ = 0.0;
  trend_ring_.assign(o_.trend_nights, 0.0);
  trend_n_ = trend_head_ = 0;
  result_ = NightResult{};
  return true;
}

bool NightFlowAnalyzer::Step(double t, bool valid, double q_m3_s, double p_head_m) {
  if (!std::isfinite(t) || std::fabs(t) > 1e12) return false;  // not a time: ignored
  const double local = o_.offsets.Local(t);
  const int64_t day = LocalDayOf(local);
  const double hour = (local - static_cast<double>(day) * kSecondsPerDay) / kSecondsPerHour;
  bool closed = false;
  // A day left without its night published (data ending inside the window,
  // or a gap) is closed with what it has.
  if (have_day_ && day != day_ && !day_closed_) closed = CloseDay();
  if (!have_day_ || day != day_) {
    have_day_ = true;
    day_ = day;
    day_closed_ = false;
    have_min_ = false;
    window_samples_ = 0;
  }
  // Publish the night as soon as its window has closed.
  if (!day_closed_ && hour >= o_.window_end_h - 1e-9) {
    closed = CloseDay() || closed;
    day_closed_ = true;
  }
  valid = valid && std::isfinite(q_m3_s) && std::isfinite(p_head_m);
  // Moving average ring (a running sum of the valid samples it holds).
  if (ring_filled_ == ring_n_) {
    if (ring_ok_[ring_head_]) {
      sum_q_ -= ring_q_[ring_head_];
      sum_p_ -= ring_p_[ring_head_];
      --ring_valid_;
    }
  } else {
    ++ring_filled_;
  }
  ring_q_[ring_head_] = valid ? q_m3_s : 0.0;
  ring_p_[ring_head_] = valid ? p_head_m : 0.0;
  ring_ok_[ring_head_] = valid ? 1 : 0;
  if (valid) {
    sum_q_ += q_m3_s;
    sum_p_ += p_head_m;
    ++ring_valid_;
  }
  ring_head_ = (ring_head_ + 1) % ring_n_;
  if (ring_valid_ == 0) sum_q_ = sum_p_ = 0.0;  // no drift of the running sums through gaps

  if (valid) {
    const int64_t hid = static_cast<int64_t>(std::floor(local / kSecondsPerHour));
    const int slot = static_cast<int>(((hid % 24) + 24) % 24);
    if (hour_id_[slot] != hid) {
      hour_id_[slot] = hid;
      hour_p_[slot] = 0.0;
      hour_n_[slot] = 0;
    }
    hour_p_[slot] += p_head_m;
    ++hour_n_[slot];
  }
  if (day_closed_) return closed;
  // The averaging span must lie inside the window: its start is
  // averaging_s before this sample.
  const double span_start_h = hour - (o_.averaging_s - o_.step_s) / kSecondsPerHour;
  if (valid && hour < o_.window_end_h && hour >= o_.window_start_h) ++window_samples_;
  if (hour < o_.window_end_h && span_start_h >= o_.window_start_h - 1e-9 && ring_filled_ == ring_n_ &&
      ring_valid_ * 2 > ring_n_) {
    const double avg = sum_q_ / ring_valid_;
    if (!have_min_ || avg < min_avg_) {
      have_min_ = true;
      min_avg_ = avg;
      min_p_ = sum_p_ / ring_valid_;
      min_t_ = t - 0.5 * (o_.averaging_s - o_.step_s);
    }
  }
  return closed;
}

bool NightFlowAnalyzer::Finish() {
  if (!have_day_ || day_closed_) return false;
  const bool closed = CloseDay();
  have_day_ = false;
  return closed;
}

bool NightFlowAnalyzer::CloseDay() {
  const double window_steps = (o_.window_end_h - o_.window_start_h) * kSecondsPerHour / o_.step_s;
  if (!have_min_ || window_samples_ < kMinWindowFraction * window_steps) return false;
  NightResult r;
  r.local_day = day_;
  r.mnf_time_s = min_t_;
  r.mnf_m3_h = min_avg_ * kSecondsPerHour;
  r.night_pressure_head_m = min_p_;
  r.legitimate_night_use_m3_h = legit_m3_h_;
  r.night_leakage_m3_h = r.mnf_m3_h - legit_m3_h_;
  r.valid_samples = window_samples_;
  // Hour-day factor from the hourly mean pressures of the 24 local hours
  // before the window's end against the pressure at the MNF; missing hours
  // (up to 24 - kMinHdfHours) are represented by the mean of the hours
  // present.
  int hours = 0;
  double sum = 0.0;
  std::array<double, 24> p{};
  const int64_t end_hid = day_ * 24 + static_cast<int64_t>(std::ceil(o_.window_end_h - 1e-9));
  for (int h = 0; h < 24; ++h) {
    if (hour_n_[h] > 0 && hour_id_[h] >= end_hid - 24 && hour_id_[h] < end_hid) p[hours++] = hour_p_[h] / hour_n_[h];
  }
  if (hours >= kMinHdfHours && r.night_pressure_head_m > 0.0) {
    sum = HourDayFactor_h(p.data(), hours, 1.0, r.night_pressure_head_m, o_.n1);
    r.hdf_h = hours == 24 ? sum : sum * 24.0 / hours;
    r.daily_leakage_m3 = r.night_leakage_m3_h * r.hdf_h;
  } else {
    r.hdf_h = kNaN;
    r.daily_leakage_m3 = kNaN;
  }
  // Change across nights: one-sided upper CUSUM (Page 1954) on night
  // leakage, standardised by the baseline nights' mean and spread.
  ++nights_;
  const double x = r.night_leakage_m3_h;
  if (nights_ <= o_.baseline_nights) {
    base_sum_ += x;
    base_sum2_ += x * x;
    if (nights_ == o_.baseline_nights) {
      const double n = static_cast<double>(nights_);
      base_mean_ = base_sum_ / n;
      const double var = std::max(0.0, (base_sum2_ - n * base_mean_ * base_mean_) / (n - 1.0));
      base_sigma_ = std::max(std::sqrt(var), o_.min_sigma_m3_h);
    }
    r.cusum = 0.0;
  } else {
    cusum_ = std::max(0.0, cusum_ + (x - base_mean_) / base_sigma_ - o_.cusum_k_sigmas);
    r.cusum = cusum_;
    if (cusum_ > o_.cusum_h_sigmas) {
      r.change = true;
      cusum_ = 0.0;  // restart; the new level becomes the baseline
      base_mean_ = x;
    }
  }
  // Trend: least-squares slope of night leakage against night number.
  trend_ring_[trend_head_] = x;
  trend_head_ = (trend_head_ + 1) % o_.trend_nights;
  trend_n_ = std::min(trend_n_ + 1, o_.trend_nights);
  if (trend_n_ >= 3) {
    double sx = 0, sy = 0, sxx = 0, sxy = 0;
    for (int i = 0; i < trend_n_; ++i) {
      const int idx = (trend_head_ - trend_n_ + i + o_.trend_nights) % o_.trend_nights;
      const double xi = i, yi = trend_ring_[idx];
      sx += xi; sy += yi; sxx += xi * xi; sxy += xi * yi;
    }
    const double n = trend_n_;
    r.trend_m3_h_per_day = (n * sxy - sx * sy) / (n * sxx - sx * sx);
  } else {
    r.trend_m3_h_per_day = kNaN;
  }
  result_ = r;
  return true;
}

}  // namespace holdfast::water
