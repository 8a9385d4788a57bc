#include "replay_driver.h"

#include <cmath>
#include <cstdio>

#include "holdfast/monitor.h"
#include "readings_csv.h"

namespace holdfast {

bool CsvReadingSource::Next(Reading* r) { return reader_->Next(r); }
uint64_t CsvReadingSource::bytes_read() const { return reader_->bytes_read(); }

bool ReplayOptions::IsValid(std::string* why) const {
  auto fail = [why](const std::string& text) {
    if (why) *why = text;
    return false;
  };
  if (std::isinf(start_s)) return fail("start_s must be finite or NaN");
  if (std::isinf(until_s)) return fail("until_s must be finite or NaN");
  if (std::isfinite(start_s) && std::isfinite(until_s) && until_s < start_s)
    return fail("until_s (" + FormatIsoUtc(until_s, 3) + ") is before start_s (" + FormatIsoUtc(start_s, 3) + ")");
  return true;
}

std::string ReplayResult::ToString() const {
  char buf[256];
  std::snprintf(buf, sizeof buf, "%llu readings fed, %llu before start, %llu ticks (%s .. %s), %llu events%s%s",
                static_cast<unsigned long long>(readings_fed), static_cast<unsigned long long>(readings_before_start),
                static_cast<unsigned long long>(ticks),
                std::isfinite(first_tick_s) ? FormatIsoUtc(first_tick_s, 3).c_str() : "-",
                std::isfinite(last_tick_s) ? FormatIsoUtc(last_tick_s, 3).c_str() : "-",
                static_cast<unsigned long long>(events), reached_until ? ", stopped at until" : "",
                stopped ? ", stopped by the caller" : "");
  return buf;
}

ReplayResult RunReplay(Monitor* monitor, ReadingSource* source, double tick_s, const ReplayOptions& options) {
  ReplayResult res;
  if (monitor == nullptr || source == nullptr || !(tick_s > 0.0) || !std::isfinite(tick_s) ||
      !options.IsValid(nullptr))
    return res;
  const bool has_start = std::isfinite(options.start_s);
  const bool has_until = std::isfinite(options.until_s);

  double first_tick = 0.0;
  uint64_t k = 0;  // index of the next tick
  double next_tick = 0.0;
  bool started = false;
  bool go_on = true;
  double last_time = 0.0;

  // One tick: advance, hand over the events, then the per-tick callback.
  auto tick = [&](double t) {
    monitor->Advance(t);
    AlarmEvent e;
    while (monitor->PopEvent(&e)) {
      ++res.events;
      if (options.on_event) options.on_event(e);
    }
    if (res.ticks == 0) res.first_tick_s = t;
    res.last_tick_s = t;
    ++res.ticks;
    ++k;
    next_tick = first_tick + static_cast<double>(k) * tick_s;
    if (options.on_tick && !options.on_tick(t)) go_on = false;
  };

  Reading r;
  while (go_on && source->Next(&r)) {
    if (has_start && r.time_s < options.start_s) {
      ++res.readings_before_start;
      continue;
    }
    if (has_until && r.time_s > options.until_s) {
      res.reached_until = true;
      break;
    }
    if (!started) {
      first_tick = std::ceil(r.time_s / tick_s) * tick_s;
      next_tick = first_tick;
      last_time = r.time_s;
      started = true;
    }
    while (go_on && r.time_s > next_tick) tick(next_tick);
    if (!go_on) break;
    monitor->Feed(r);
    ++res.readings_fed;
    if (r.time_s > last_time) last_time = r.time_s;
  }
  if (started) {
    while (go_on && next_tick <= last_time + 1e-9) tick(next_tick);
  }
  res.stopped = !go_on;
  return res;
}

}  // namespace holdfast
