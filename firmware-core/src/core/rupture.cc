// Rupture fast path (rupture.h).
#include "holdfast/rupture.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "holdfast/pipe.h"

namespace holdfast {

// One end first: the far end's opposite-signed signal over the look-back, as
// a share of the leading end's (a leak sends none; a sloshing blocked-in
// line about as much as it sends the leading end).
constexpr double kOppositeShare = 0.25;
// The line-itself path's noise gate (the header): each third of its 30 s
// must exceed this many learnt sigmas of the in-control 10 s imbalance rate,
// learnt for kPartNoiseLearn_s after a start (the path is off meanwhile) and
// then followed with time constant kPartNoiseTau_s.
constexpr double kPartNoiseSigmas = 6.0;
constexpr double kPartNoiseLearn_s = 1800.0;
constexpr double kPartNoiseTau_s = 3600.0;

bool RuptureOptions::IsValid(std::string* why) const {
  auto fail = [&](const char* m) { if (why) *why = m; return false; };
  if (!(window_s > 0.0)) return fail("rupture: window_s must be positive");
  if (!(reference_s >= window_s) || !std::isfinite(reference_s)) return fail("rupture: reference_s must be at least window_s");
  if (!(average_s > 0.0 && average_s < 0.5 * window_s)) return fail("rupture: average_s must be in (0, window_s / 2)");
  if (!(min_span_s >= 2.0 * average_s && min_span_s <= window_s))
    return fail("rupture: min_span_s must be in [2 average_s, window_s]");
  if (!(leak_fraction > 0.0)) return fail("rupture: leak_fraction must be positive");
  if (!(wave_share > 0.0 && wave_share <= 2.0)) return fail("rupture: wave_share must be in (0, 2]");
  if (!(metered_share >= 0.0 && metered_share <= 1.0)) return fail("rupture: metered_share must be in [0, 1]");
  if (!(balance_share >= 0.0 && balance_share <= 1.0)) return fail("rupture: balance_share must be in [0, 1]");
  if (!(pressure_sigmas > 0.0)) return fail("rupture: pressure_sigmas must be positive");
  if (!(quiet_share > 0.0)) return fail("rupture: quiet_share must be positive");
  if (!(rest_settle_s >= 0.0) || !std::isfinite(rest_settle_s)) return fail("rupture: rest_settle_s must be >= 0");
  return true;
}

bool RuptureStatus::LeakLike(double threshold_kg_s) const {
  // A standing line's restart sends the waves a leak would (the header):
  // there, only a rupture raised at rest is leak-like.
  if (standing) return rupture && at_rest;
  if (one_end != 0) return true;
  const bool out_ok = std::isnan(wave_out_kg_s) ? outlet_fall_pa > 0.0 : wave_out_kg_s >= threshold_kg_s;
  return wave_in_kg_s >= threshold_kg_s && out_ok && metered_kg_s > 0.0 &&
         std::fabs(lateral_change_kg_s) <= 0.5 * threshold_kg_s;
}

std::string RuptureStatus::ToString() const {
  char buf[512];
  std::snprintf(buf, sizeof buf,
                "rupture=%d wave_in=%.3f kg/s wave_out=%.3f kg/s outlet_fall=%.0f Pa metered=%.3f kg/s "
                "balance=%.3f kg/s estimate=%.3f kg/s span=%.1f s before: wave_in=%.3f metered=%.3f kg/s "
                "one_end=%d far: in=%.3f out=%.3f kg/s standing=%d at_rest=%d",
                rupture ? 1 : 0, wave_in_kg_s, wave_out_kg_s, outlet_fall_pa, metered_kg_s, balance_kg_s,
                estimate_kg_s, span_s, wave_in_before_kg_s, metered_before_kg_s, one_end, far_in_kg_s, far_out_kg_s,
                standing ? 1 : 0, at_rest ? 1 : 0);
  return buf;
}

bool RuptureDetector::Init(const RuptureOptions& options, const SegmentSpec& segment, double tick_s,
                           double density_kg_m3, double bulk_modulus_pa, double outlet_pressure_sigma_pa,
                           std::string* why) {
  if (!options.IsValid(why)) return false;
  if (segment.sections.empty() || !(tick_s > 0.0) || !(density_kg_m3 > 0.0) || !(bulk_modulus_pa > 0.0)) {
    if (why) *why = "rupture: the segment needs sections, a tick, a density and a bulk modulus";
    return false;
  }
  options_ = options;
  threshold_kg_s_ = options.leak_fraction * segment.nominal_flow_kg_s;
  auto b_of = [&](const PipeSection& s) {
    return s.flow_area_m2() / WaveSpeed(bulk_modulus_pa, density_kg_m3, s);
  };
  b_in_ = b_of(segment.sections.front());
  b_out_ = b_of(segment.sections.back());
  // With a tank inside the control volume the outlet meters measure what
  // leaves the tank, not the pipe end.
  outlet_at_pipe_end_ = segment.tanks.empty();
  outlet_sigma_pa_ = outlet_pressure_sigma_pa;
  double travel_s = 0.0;  // L / a, section by section
  for (const PipeSection& s : segment.sections) travel_s += s.length_m / WaveSpeed(bulk_modulus_pa, density_kg_m3, s);
  const double far_span_s = options.window_s + 1.25 * travel_s + 2.0 * options.average_s;
  span_s_ = std::max(options.reference_s, far_span_s);
  // The ring is bounded (one hour of ticks): a line too long for it has no one-end path.
  constexpr double kMaxRing_s = 3600.0;
  one_end_ok_ = options.one_end && far_span_s <= kMaxRing_s;
  span_s_ = std::min(span_s_, std::max(options.reference_s, kMaxRing_s));
  ring_.assign(static_cast<size_t>(std::ceil(span_s_ / tick_s)) + 2, Sample{});
  head_ = count_ = 0;
  cum_res_kg_ = 0.0;
  part_rate_var_ = part_rate_learnt_s_ = 0.0;
  rest_since_s_ = kNaN;
  status_ = RuptureStatus{};
  return true;
}

// The ring's times increase, so the first sample at or after a time is found
// by bisection: the per-tick cost does not grow with the kept span.
int RuptureDetector::FirstFrom(int lo, int hi, double from) const {
  const int size = static_cast<int>(ring_.size());
  while (lo < hi) {
    const int mid = lo + (hi - lo) / 2;
    const int slot = head_ + mid;  // head_ < size and mid < size: one wrap at most
    if (ring_[slot < size ? slot : slot - size].t < from) lo = mid + 1; else hi = mid;
  }
  return lo;
}

RuptureDetector::Sample RuptureDetector::MeanOver(int first, int n, double from, double to) const {
  Sample m;
  int k = 0;
  const int size = static_cast<int>(ring_.size());
  // first is a ring slot; as an offset from head_ it starts the bisection.
  const int offset = (first - head_ + size) % size;
  const int start = FirstFrom(offset, offset + n, from) - offset;
  int slot = (first + start) % size;
  for (int i = start; i < n; ++i, slot = slot + 1 == size ? 0 : slot + 1) {
    const Sample& s = ring_[slot];
    if (s.t > to) break;
    m.t += s.t; m.s_in += s.s_in; m.s_out += s.s_out; m.lat += s.lat; m.net += s.net; m.p_out += s.p_out;
    m.cum_res_kg += s.cum_res_kg;
    m.g_in += s.g_in; m.g_out += s.g_out;
    ++k;
  }
  if (k > 0) {
    const double w = 1.0 / k;
    m.t *= w; m.s_in *= w; m.s_out *= w; m.lat *= w; m.net *= w; m.p_out *= w; m.cum_res_kg *= w;
    m.g_in *= w; m.g_out *= w;
  }
  return m;
}

const RuptureStatus& RuptureDetector::Step(double t, const RuptureInput& in) {
  status_.rupture = false;
  const int size = static_cast<int>(ring_.size());
  if (count_ > 0) cum_res_kg_ += in.residual_kg_s * (t - last_t_);
  else cum_res_kg_ = 0.0;
  last_t_ = t;
  Sample s;
  s.t = t;
  s.s_in = in.inflow_kg_s - b_in_ * in.p_inlet_pa;
  s.s_out = -in.outflow_kg_s - b_out_ * in.p_outlet_pa;
  s.lat = in.lateral_out_kg_s;
  s.net = in.inflow_kg_s - in.outflow_kg_s - in.lateral_out_kg_s;
  s.p_in = in.p_inlet_pa;
  s.p_out = in.p_outlet_pa;
  s.cum_res_kg = cum_res_kg_;
  s.g_in = in.inflow_kg_s + b_in_ * in.p_inlet_pa;
  s.g_out = -in.outflow_kg_s + b_out_ * in.p_outlet_pa;
  const int slot = (head_ + count_) % size;
  if (count_ == size) head_ = (head_ + 1) % size; else ++count_;
  ring_[slot] = s;
  // Drop samples older than the longer reference.
  while (count_ > 1 && t - ring_[head_].t > span_s_ + 1e-9) {
    head_ = (head_ + 1) % size;
    --count_;
  }
  // The first sample within a span of t, by bisection on the times.
  auto first_within = [&](double span) {
    int lo = 0, hi = count_ - 1;
    while (lo < hi) {
      const int mid = lo + (hi - lo) / 2;
      const int slot = head_ + mid;
      if (t - ring_[slot < size ? slot : slot - size].t > span + 1e-9) lo = mid + 1; else hi = mid;
    }
    return lo;
  };
  const int first = first_within(options_.window_s);  // the look-back's start
  const double t0 = ring_[(head_ + first) % size].t;
  status_.span_s = t - t0;
  status_.at_rest = false;
  const double thr = threshold_kg_s_;
  const double quiet = options_.quiet_share * thr;
  // A standing line (the header): blocked in at the reference or at the
  // look-back's start.
  // With a tank inside, the outlet meters measure what leaves the tank (it
  // may deliver through a shut-in): the pipe stands when its inlet does.
  auto still = [&](const Sample& x) {
    const double m_in = 0.5 * (x.s_in + x.g_in), m_out = -0.5 * (x.s_out + x.g_out);
    return std::fabs(m_in) <= quiet && (!outlet_at_pipe_end_ || std::fabs(m_out) <= quiet);
  };
  if (!still(s)) rest_since_s_ = kNaN;
  else if (std::isnan(rest_since_s_)) rest_since_s_ = t;
  if (status_.span_s < options_.min_span_s) return status_;
  const Sample a = MeanOver((head_ + first) % size, count_ - first, t0, t0 + options_.average_s);
  // The newest samples: walk back from the end.
  int back = 0;
  while (back < count_ - first - 1 && t - ring_[(head_ + count_ - 2 - back) % size].t <= options_.average_s + 1e-9)
    ++back;
  const Sample b = MeanOver((head_ + count_ - 1 - back) % size, back + 1, t - options_.average_s - 1e-9, t);
  const int ref_first = first_within(options_.reference_s);  // the first sample within reference_s
  const double t_ref = ring_[(head_ + ref_first) % size].t;
  const bool have_ref = t - t_ref >= options_.reference_s - options_.average_s;
  const Sample r = MeanOver((head_ + ref_first) % size, count_ - ref_first, t_ref, t_ref + options_.average_s);
  status_.wave_in_before_kg_s = have_ref ? (a.s_in - r.s_in) - (a.lat - r.lat) : kNaN;
  status_.metered_before_kg_s = have_ref ? a.net - r.net : kNaN;
  const double dlat = b.lat - a.lat;
  status_.lateral_change_kg_s = dlat;
  status_.wave_in_kg_s = (b.s_in - a.s_in) - dlat;
  status_.wave_out_kg_s = outlet_at_pipe_end_ ? (b.s_out - a.s_out) - dlat : kNaN;
  status_.outlet_fall_pa = a.p_out - b.p_out;
  status_.metered_kg_s = b.net - a.net;
  status_.balance_kg_s = (b.cum_res_kg - a.cum_res_kg) / std::max(1e-9, b.t - a.t);
  status_.estimate_kg_s = outlet_at_pipe_end_ ? 0.5 * (status_.wave_in_kg_s + status_.wave_out_kg_s)
                                              : status_.wave_in_kg_s;
  const double wave = options_.wave_share * thr;
  // A mean of n samples at each end: the difference has sigma sqrt(2/n).
  const double n_avg = std::max(1.0, options_.average_s / std::max(1e-9, status_.span_s / count_));
  const bool outlet_ok = outlet_at_pipe_end_
                             ? status_.wave_out_kg_s >= wave
                             : status_.outlet_fall_pa > options_.pressure_sigmas * outlet_sigma_pa_ *
                                                            std::sqrt(2.0 / n_avg);
  // Before the longer reference is available (a start or a gap), the
  // look-back alone decides.
  const bool ref_ok = !have_ref || (std::fabs(status_.wave_in_before_kg_s) <= quiet &&
                                    std::fabs(status_.metered_before_kg_s) <= quiet &&
                                    std::fabs(a.lat - r.lat) <= quiet);
  // A metered delivery or injection that changed is an operator's doing:
  // its waves reach the ends later than its meter shows it (by x / a, and
  // smeared by friction on a long line), so over the look-back the ends can
  // look as if an unmetered flow had appeared. Left to the decision.
  const bool laterals_quiet = std::fabs(dlat) <= options_.quiet_share * thr;
  status_.standing = still(a) || (have_ref && still(r));
  status_.rupture = !status_.standing && status_.wave_in_kg_s >= wave && outlet_ok && ref_ok && laterals_quiet &&
                    status_.metered_kg_s >= options_.metered_share * thr &&
                    status_.balance_kg_s >= options_.balance_share * thr;
  // At rest (the header): settled, both ends' pressures fall, no meter moved.
  if (status_.standing && t - rest_since_s_ >= options_.rest_settle_s && have_ref &&
      status_.wave_in_kg_s >= wave && outlet_ok && ref_ok && laterals_quiet &&
      std::fabs(status_.metered_kg_s) <= quiet && status_.balance_kg_s >= options_.balance_share * thr) {
    status_.rupture = status_.at_rest = true;
  }
  status_.one_end = 0;
  status_.far_in_kg_s = status_.far_out_kg_s = kNaN;
  // One end first (the header): the far end's own change over the look-back
  // plus its waves' travel time.
  // The line-itself path's noise gate: the newest sixth of the look-back's
  // imbalance rate, learnt while it is within the gate (a leak's is not).
  if (have_ref) {
    const double part_s = options_.window_s / 6.0;
    const Sample p = MeanOver((head_ + first) % size, count_ - first, t - part_s - options_.average_s, t - part_s);
    const double x = (b.cum_res_kg - p.cum_res_kg) / std::max(1e-9, b.t - p.t);
    const double dt = std::max(0.0, t - ring_[(head_ + count_ - 2 + size) % size].t);
    const bool learning = part_rate_learnt_s_ < kPartNoiseLearn_s;
    if (learning || x * x <= kPartNoiseSigmas * kPartNoiseSigmas * part_rate_var_) {
      const double w = learning ? dt / std::max(dt, part_rate_learnt_s_ + dt) : std::min(1.0, dt / kPartNoiseTau_s);
      part_rate_var_ += w * (x * x - part_rate_var_);
      part_rate_learnt_s_ += dt;
    }
  }
  const double t_far = ring_[head_].t;
  if (one_end_ok_ && !status_.rupture && !status_.standing && t - t_far >= span_s_ - options_.average_s - 1e-9 &&
      laterals_quiet && status_.balance_kg_s >= options_.balance_share * thr && status_.metered_kg_s >= 0.0) {
    const Sample f = MeanOver(head_, count_, t_far, t_far + options_.average_s);
    status_.far_in_kg_s = std::fabs(b.g_in - f.g_in) - std::fabs(b.s_in - f.s_in);
    status_.far_out_kg_s = outlet_at_pipe_end_ ? std::fabs(b.g_out - f.g_out) - std::fabs(b.s_out - f.s_out)
                                               : b_out_ * (b.p_out - f.p_out);
    // The far end must not be hearing the opposite wave over the look-back
    // (more than kOppositeShare of the leading end's signal)
    // (a compression where a leak sends a rarefaction): a blocked-in line's
    // waves slosh between its closed ends, a fall at one end while the other
    // rises, and at a closed end no invariant tells an arriving wave from
    // the end's own.
    const double out_opposite = outlet_at_pipe_end_ ? -status_.wave_out_kg_s : -b_out_ * status_.outlet_fall_pa;
    const double in_opposite = -status_.wave_in_kg_s;
    // The leading end passive as well (the header): its own |dg| - |ds|.
    if (status_.wave_in_kg_s >= wave && ref_ok && status_.far_out_kg_s <= quiet && status_.far_in_kg_s <= quiet &&
        out_opposite <= kOppositeShare * status_.wave_in_kg_s) {
      status_.one_end = 1;
    } else if (outlet_at_pipe_end_ && status_.wave_out_kg_s >= wave && status_.far_in_kg_s <= quiet &&
               status_.far_out_kg_s <= quiet &&
               in_opposite <= kOppositeShare * status_.wave_out_kg_s) {
      const double out_before = have_ref ? (a.s_out - r.s_out) - (a.lat - r.lat) : 0.0;
      if (std::fabs(out_before) <= quiet && std::fabs(status_.metered_before_kg_s) <= quiet &&
          (!have_ref || std::fabs(a.lat - r.lat) <= quiet))
        status_.one_end = 2;
    }
    // The line itself (one_end 3): on a long line neither end may hear a
    // far rupture within the look-back, but the line pack from the
    // transmitters near it falls at once. Raised when the compensated
    // imbalance over the last half of the look-back is a lasting shortfall
    // (at least the threshold over it, and half of it in each of its thirds:
    // a transmitter's step is one instant of line-pack change, which the
    // end means smear over two thirds at most, not a rate), the line was
    // balanced from the reference to it, neither end made a change of its
    // own (far_in, far_out) or hears a compression, and the metered
    // shortfall did not fall.
    if (status_.one_end == 0 && ref_ok && have_ref && status_.far_in_kg_s <= quiet &&
        status_.far_out_kg_s <= quiet && in_opposite <= kOppositeShare * thr &&
        out_opposite <= kOppositeShare * thr && part_rate_learnt_s_ >= kPartNoiseLearn_s) {
      const double part_s = options_.window_s / 6.0;
      Sample m[4];
      for (int k = 0; k < 3; ++k) {
        const double tb = t - (3 - k) * part_s;
        m[k] = MeanOver((head_ + first) % size, count_ - first, tb - options_.average_s, tb);
      }
      m[3] = b;
      auto rate = [](const Sample& x, const Sample& y) {
        return (y.cum_res_kg - x.cum_res_kg) / std::max(1e-9, y.t - x.t);
      };
      const double lasting = rate(m[0], m[3]);
      const double weakest = std::min({rate(m[0], m[1]), rate(m[1], m[2]), rate(m[2], m[3])});
      const double before = rate(r, m[0]);
      const double out_before = outlet_at_pipe_end_ ? (a.s_out - r.s_out) - (a.lat - r.lat) : 0.0;
      const double gate = kPartNoiseSigmas * std::sqrt(part_rate_var_);
      if (lasting >= thr && weakest >= std::max(0.5 * thr, gate) && std::fabs(before) <= quiet &&
          std::fabs(out_before) <= quiet) {
        status_.one_end = 3;
        status_.estimate_kg_s = lasting;
      }
    }
    status_.rupture = status_.one_end != 0;
    if (status_.one_end == 1) status_.estimate_kg_s = status_.wave_in_kg_s;
    if (status_.one_end == 2) status_.estimate_kg_s = status_.wave_out_kg_s;
  }
  return status_;
}

}  // namespace holdfast

namespace holdfast {

int RuptureDetector::EndPressures(PressureSample* inlet, PressureSample* outlet) const {
  const int size = static_cast<int>(ring_.size());
  if (count_ == 0) return 0;
  const double newest = ring_[(head_ + count_ - 1) % size].t;
  int n = 0;
  for (int i = 0; i < count_; ++i) {
    const Sample& s = ring_[(head_ + i) % size];
    if (newest - s.t > options_.window_s + 1e-9) continue;  // the look-back only
    inlet[n] = PressureSample{s.t, s.p_in};
    outlet[n] = PressureSample{s.t, s.p_out};
    ++n;
  }
  return n;
}

}  // namespace holdfast
