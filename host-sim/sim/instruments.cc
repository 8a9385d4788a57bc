#include "instruments.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace holdfast::sim {

uint64_t SplitMix64(uint64_t x) {
  // Steele, Lea & Flood (2014), "Fast splittable pseudorandom number generators".
  x += 0x9E3779B97F4A7C15ull;
  x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9ull;
  x = (x ^ (x >> 27)) * 0x94D049BB133111EBull;
  return x ^ (x >> 31);
}

uint64_t StreamSeed(uint64_t seed, const std::string& name) {
  // FNV-1a, 64 bit (Fowler, Noll & Vo).
  uint64_t h = 0xCBF29CE484222325ull;
  for (unsigned char c : name) {
    h ^= c;
    h *= 0x100000001B3ull;
  }
  return SplitMix64(SplitMix64(seed) ^ h);
}

double Rng::Uniform() {
  return static_cast<double>(gen_() >> 11) * 0x1.0p-53;
}

double Rng::Normal() {
  // Marsaglia & Bray (1964), "A convenient method for generating normal
  // variables", SIAM Review 6(3): u, v uniform on (-1, 1), s = u^2 + v^2 in
  // (0, 1); then u sqrt(-2 ln s / s) and v sqrt(-2 ln s / s) are independent N(0, 1).
  if (has_spare_) {
    has_spare_ = false;
    return spare_;
  }
  double u = 0.0, v = 0.0, s = 0.0;
  do {
    u = 2.0 * Uniform() - 1.0;
    v = 2.0 * Uniform() - 1.0;
    s = u * u + v * v;
  } while (s >= 1.0 || s == 0.0);
  const double f = std::sqrt(-2.0 * std::log(s) / s);
  spare_ = v * f;
  has_spare_ = true;
  return u * f;
}

bool InstrumentSpec::IsValid(std::string* why) const {
  auto fail = [&](const char* s) {
    if (why) *why = s;
    return false;
  };
  if (!(sample_period_s > 0.0)) return fail("sample period must be positive");
  if (!(phase_s >= 0.0)) return fail("phase must not be negative");
  if (!(noise >= 0.0 && noise_fraction >= 0.0)) return fail("noise must not be negative");
  if (!(bias_draw_sigma >= 0.0 && bias_draw_sigma_fraction >= 0.0)) return fail("bias sigma must not be negative");
  if (!(quantum >= 0.0 && deadband >= 0.0 && heartbeat_s >= 0.0)) return fail("quantum, deadband and heartbeat must not be negative");
  if (!(latency_s >= 0.0 && latency_spread_s >= 0.0 && jitter_s >= 0.0)) return fail("latency and jitter must not be negative");
  if (!(spike_rate_per_h >= 0.0)) return fail("spike rate must not be negative");
  if (!(wander >= 0.0 && wander_fraction >= 0.0)) return fail("wander must not be negative");
  if (!(wander_phi >= 0.0 && wander_phi < 1.0)) return fail("wander_phi must be in [0, 1)");
  if (!(low_flow_cutoff >= 0.0)) return fail("low-flow cut-off must not be negative");
  return true;
}

void Instrument::Init(int point, const std::string& id, const InstrumentSpec& spec, uint64_t seed, uint64_t bias_seed,
                      double duration_s) {
  spec_ = spec;
  point_ = point;
  duration_s_ = duration_s;
  noise_ = Rng(StreamSeed(seed, "noise/" + id));
  timing_ = Rng(StreamSeed(seed, "timing/" + id));
  wander_rng_ = Rng(StreamSeed(seed, "wander/" + id));
  // Stationary start: w_0 ~ N(0, 1).
  wander_state_ = spec.wander_phi > 0.0 ? wander_rng_.Normal() : 0.0;
  Rng bias(StreamSeed(bias_seed, "bias/" + id));
  const double z1 = bias.Normal(), z2 = bias.Normal();
  bias_ = spec.bias + spec.bias_draw_sigma * z1;
  bias_fraction_ = spec.bias_fraction + spec.bias_draw_sigma_fraction * z2;
  std::sort(spec_.spikes.begin(), spec_.spikes.end(), [](const Spike& a, const Spike& b) { return a.at_s < b.at_s; });
  if (spec.decimals >= 0) {
    decimals_ = spec.decimals;
  } else if (spec.quantum > 0.0) {
    decimals_ = std::max(0, std::min(9, static_cast<int>(std::ceil(-std::log10(spec.quantum) - 1e-9))));
  } else {
    decimals_ = 6;
  }
  k_ = 0;
  next_s_ = spec.enabled && spec.phase_s <= duration_s ? spec.phase_s : std::numeric_limits<double>::infinity();
  next_spike_ = 0;
  have_last_ = in_flatline_ = have_sent_ = false;
  samples_ = sent_ = 0;
}

uint64_t Instrument::MaxReadings() const {
  if (!spec_.enabled || spec_.phase_s > duration_s_) return 0;
  return static_cast<uint64_t>(std::floor((duration_s_ - spec_.phase_s) / spec_.sample_period_s)) + 1;
}

bool Instrument::Sample(double true_value, SimReading* out) {
  const double t = next_s_;
  ++k_;
  ++samples_;
  const double next = spec_.phase_s + static_cast<double>(k_) * spec_.sample_period_s;
  next_s_ = next <= duration_s_ ? next : std::numeric_limits<double>::infinity();

  // The same draws every sample, whatever is sent, so that one setting does
  // not shift the random numbers of another.
  const double z = noise_.Normal();
  const double u_jitter = timing_.Uniform();
  const double u_latency = timing_.Uniform();
  const double u_spike = timing_.Uniform();
  const double u_sign = timing_.Uniform();

  const double days = t / 86400.0;
  double v = true_value * (1.0 + bias_fraction_ + spec_.drift_fraction_per_day * days) + bias_ + spec_.drift_per_day * days;
  const double sigma = spec_.noise + spec_.noise_fraction * std::fabs(true_value);
  v += sigma * z;
  if (spec_.wander_phi > 0.0) {
    // AR(1), Box & Jenkins (1976): the innovation's variance 1 - phi^2 keeps
    // the process at unit variance; the first sample uses w_0 itself.
    if (samples_ > 1)
      wander_state_ = spec_.wander_phi * wander_state_ +
                      std::sqrt(1.0 - spec_.wander_phi * spec_.wander_phi) * wander_rng_.Normal();
    v += (spec_.wander + spec_.wander_fraction * std::fabs(true_value)) * wander_state_;
  }
  while (next_spike_ < spec_.spikes.size() && spec_.spikes[next_spike_].at_s <= t) {
    v += spec_.spikes[next_spike_].size;
    ++next_spike_;
  }
  if (spec_.spike_rate_per_h > 0.0 && u_spike < spec_.spike_rate_per_h * spec_.sample_period_s / 3600.0)
    v += u_sign < 0.5 ? -spec_.spike_size : spec_.spike_size;

  // A stuck transmitter repeats the last value it measured before the window.
  bool flat = false;
  for (const TimeWindow& w : spec_.flatlines)
    if (w.Contains(t)) flat = true;
  if (flat) {
    if (!in_flatline_) frozen_ = have_last_ ? last_measured_ : v;
    in_flatline_ = true;
    v = frozen_;
  } else {
    in_flatline_ = false;
    last_measured_ = v;
    have_last_ = true;
  }
  if (spec_.low_flow_cutoff > 0.0 && std::fabs(v) < spec_.low_flow_cutoff) v = 0.0;
  if (spec_.quantum > 0.0) v = std::round(v / spec_.quantum) * spec_.quantum;

  for (const TimeWindow& w : spec_.dropouts)
    if (w.Contains(t)) return false;

  // Report by exception.
  if (spec_.deadband > 0.0 || spec_.heartbeat_s > 0.0) {
    const bool moved = !have_sent_ || std::fabs(v - last_sent_value_) > spec_.deadband ||
                       (spec_.deadband == 0.0 && v != last_sent_value_);
    const bool beat = spec_.heartbeat_s > 0.0 && have_sent_ && t - last_sent_s_ >= spec_.heartbeat_s - 1e-9;
    if (!moved && !beat) return false;
  }
  have_sent_ = true;
  last_sent_value_ = v;
  last_sent_s_ = t;

  Quality q = Quality::kGood;
  for (const QualityWindow& w : spec_.quality_windows)
    if (w.window.Contains(t)) q = w.quality;
  out->time_s = std::max(0.0, t + spec_.jitter_s * (2.0 * u_jitter - 1.0));
  out->arrival_s = t + spec_.latency_s + spec_.latency_spread_s * u_latency;
  out->value = v;
  out->point = point_;
  out->quality = q;
  out->sequence = static_cast<uint32_t>(sent_);
  ++sent_;
  return true;
}

}  // namespace holdfast::sim
