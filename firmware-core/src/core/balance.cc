#include "holdfast/balance.h"

#include <cmath>

namespace holdfast {

double NormalQuantile(double p) {
  if (!(p > 0.0)) return -INFINITY;
  if (!(p < 1.0)) return INFINITY;
  // Start from a logistic-style guess, then Newton with a bisection guard.
  double lo = -40.0, hi = 40.0;
  double x = p < 0.5 ? -std::sqrt(-2.0 * std::log(p)) : std::sqrt(-2.0 * std::log(1.0 - p));
  x *= 0.85;
  for (int it = 0; it < 100; ++it) {
    const double cdf = 0.5 * std::erfc(-x / std::sqrt(2.0));
    const double pdf = std::exp(-0.5 * x * x) / std::sqrt(2.0 * M_PI);
    const double f = cdf - p;
    if (f > 0.0) hi = x; else lo = x;
    double next = pdf > 0.0 ? x - f / pdf : 0.5 * (lo + hi);
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (std::fabs(next - x) <= 1e-15 * std::fmax(1.0, std::fabs(x))) return next;
    x = next;
  }
  return x;
}

bool SegmentBalance::Options::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = m; return false; };
  if (windows_s.empty()) return fail("balance: at least one window is needed");
  if (static_cast<int>(windows_s.size()) > kMaxWindows)
    return fail("balance: at most " + std::to_string(kMaxWindows) + " windows");
  for (double w : windows_s)
    if (!(w > 0.0) || !std::isfinite(w)) return fail("balance: windows must be positive and finite");
  if (buckets_per_window < 4 || buckets_per_window > 100000)
    return fail("balance: buckets_per_window must be between 4 and 100000");
  if (!(confidence > 0.5 && confidence < 1.0)) return fail("balance: confidence must be in (0.5, 1)");
  return true;
}

bool SegmentBalance::Init(const Options& options, std::string* why) {
  if (!options.IsValid(why)) return false;
  options_ = options;
  z_ = NormalQuantile(options.confidence);
  windows_.assign(options.windows_s.size(), Ring{});
  for (size_t i = 0; i < windows_.size(); ++i) {
    Ring& r = windows_[i];
    r.bucket_s = options.windows_s[i] / options.buckets_per_window;
    r.imbalance_kg.assign(options.buckets_per_window, 0.0);
    r.duration_s.assign(options.buckets_per_window, 0.0);
    r.ticks.assign(options.buckets_per_window, 0);
    results_[i] = WindowResult{};
    results_[i].window_s = options.windows_s[i];
  }
  Restart();
  return true;
}

void SegmentBalance::Restart() {
  for (size_t i = 0; i < windows_.size(); ++i) {
    Ring& r = windows_[i];
    std::fill(r.imbalance_kg.begin(), r.imbalance_kg.end(), 0.0);
    std::fill(r.duration_s.begin(), r.duration_s.end(), 0.0);
    std::fill(r.ticks.begin(), r.ticks.end(), 0);
    r.head = r.filled = 0;
    r.current_index = INT64_MIN;
    r.cur_imbalance_kg = r.cur_duration_s = 0.0;
    r.cur_ticks = 0;
    r.sum_imbalance_kg = r.sum_duration_s = 0.0;
    r.sum_ticks = 0;
    r.pushes_since_resum = 0;
  }
  have_prev_ = false;
  residual_kg_s_ = inventory_rate_kg_s_ = 0.0;
}

void SegmentBalance::Push(Ring& r) {
  const int n = static_cast<int>(r.imbalance_kg.size());
  if (r.filled == n) {
    r.sum_imbalance_kg -= r.imbalance_kg[r.head];
    r.sum_duration_s -= r.duration_s[r.head];
    r.sum_ticks -= r.ticks[r.head];
  } else {
    ++r.filled;
  }
  r.imbalance_kg[r.head] = r.cur_imbalance_kg;
  r.duration_s[r.head] = r.cur_duration_s;
  r.ticks[r.head] = r.cur_ticks;
  r.sum_imbalance_kg += r.cur_imbalance_kg;
  r.sum_duration_s += r.cur_duration_s;
  r.sum_ticks += r.cur_ticks;
  r.head = (r.head + 1) % n;
  r.cur_imbalance_kg = r.cur_duration_s = 0.0;
  r.cur_ticks = 0;
  // Running sums drift by round-off; re-add them exactly once per ring cycle.
  if (++r.pushes_since_resum >= n) {
    r.pushes_since_resum = 0;
    double si = 0.0, sd = 0.0;
    int64_t st = 0;
    for (int k = 0; k < n; ++k) { si += r.imbalance_kg[k]; sd += r.duration_s[k]; st += r.ticks[k]; }
    r.sum_imbalance_kg = si;
    r.sum_duration_s = sd;
    r.sum_ticks = st;
  }
}

void SegmentBalance::Advance(Ring& r, int64_t index) {
  if (r.current_index == INT64_MIN) { r.current_index = index; return; }
  const int n = static_cast<int>(r.imbalance_kg.size());
  int pushed = 0;
  while (r.current_index < index) {
    if (pushed > n) { r.current_index = index; break; }  // a long gap: the ring is all empty now
    Push(r);
    ++pushed;
    ++r.current_index;
  }
}

void SegmentBalance::Step(double t, bool valid, const MeterFlow* meters, int meter_count,
                          double inventory_kg, double sigma_inventory_p_kg,
                          double sigma_inventory_t_kg, double temperature_decay) {
  double net = 0.0;
  for (int m = 0; m < meter_count; ++m) net += meters[m].flow_kg_s;
  net_flow_kg_s_ = net;
  has_difference_ = false;
  if (!valid) {
    have_prev_ = false;
    residual_kg_s_ = inventory_rate_kg_s_ = 0.0;
    return;
  }
  double imbalance = 0.0, dt = 0.0;
  if (have_prev_ && t > prev_t_) {
    dt = t - prev_t_;
    const double flow_kg = 0.5 * (net + prev_net_kg_s_) * dt;  // trapezoid
    const double dm = inventory_kg - prev_inventory_kg_;
    imbalance = flow_kg - dm;
    residual_kg_s_ = imbalance / dt;
    inventory_rate_kg_s_ = dm / dt;
    has_difference_ = true;
  } else {
    residual_kg_s_ = inventory_rate_kg_s_ = 0.0;
  }
  have_prev_ = true;
  prev_t_ = t;
  prev_net_kg_s_ = net;
  prev_inventory_kg_ = inventory_kg;

  // Meter variance terms per second of window (random) and per second^2 (systematic).
  double rand_q2 = 0.0, sys_q2 = 0.0;
  for (int m = 0; m < meter_count; ++m) {
    const double q2 = meters[m].flow_kg_s * meters[m].flow_kg_s;
    rand_q2 += q2 * meters[m].random_frac * meters[m].random_frac;
    sys_q2 += q2 * meters[m].systematic_frac * meters[m].systematic_frac;
  }
  const double var_p2 = 2.0 * sigma_inventory_p_kg * sigma_inventory_p_kg;
  const double var_t2 = 2.0 * sigma_inventory_t_kg * sigma_inventory_t_kg;

  for (size_t i = 0; i < windows_.size(); ++i) {
    Ring& r = windows_[i];
    if (dt > 0.0) {
      Advance(r, static_cast<int64_t>(std::floor(t / r.bucket_s)));
      r.cur_imbalance_kg += imbalance;
      r.cur_duration_s += dt;
      ++r.cur_ticks;
    }
    WindowResult& out = results_[i];
    out.imbalance_kg = r.sum_imbalance_kg + r.cur_imbalance_kg;
    out.covered_s = r.sum_duration_s + r.cur_duration_s;
    const double ticks = static_cast<double>(r.sum_ticks + r.cur_ticks);
    out.full = out.covered_s >= out.window_s * (1.0 - 1e-9);
    if (out.covered_s > 0.0 && ticks > 0.0) {
      const double w = out.covered_s;
      const double tick_s = w / ticks;
      // decay^ticks, kept incrementally (ticks grows by one most of the time).
      const int64_t n_ticks = r.sum_ticks + r.cur_ticks;
      if (temperature_decay != r.pow_decay || n_ticks != r.pow_ticks + 1) {
        r.pow_value = std::pow(temperature_decay, ticks);
      } else {
        r.pow_value *= temperature_decay;
      }
      r.pow_decay = temperature_decay;
      r.pow_ticks = n_ticks;
      const double var = rand_q2 * tick_s * w + sys_q2 * w * w + var_p2 + var_t2 * (1.0 - r.pow_value);
      out.imbalance_kg_s = out.imbalance_kg / w;
      out.sigma_kg = std::sqrt(var);
      out.mdl_kg_s = z_ * out.sigma_kg / w;
    } else {
      out.imbalance_kg_s = 0.0;
      out.sigma_kg = 0.0;
      out.mdl_kg_s = 0.0;
    }
  }
}

}  // namespace holdfast
