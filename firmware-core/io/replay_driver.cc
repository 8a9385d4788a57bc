#include "replay_driver.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "holdfast/monitor.h"
#include "readings_csv.h"

namespace holdfast {

bool CsvReadingSource::Next(Reading* r) { return reader_->Next(r); }
uint64_t CsvReadingSource::bytes_read() const { return reader_->bytes_read(); }

// ---- TickScheduler ----------------------------------------------------------

bool TickScheduler::Options::IsValid(std::string* why) const {
  auto fail = [why](const char* text) {
    if (why) *why = text;
    return false;
  };
  if (!(tick_s > 0.0) || !std::isfinite(tick_s)) return fail("tick_s: must be positive");
  if (!(lateness_s >= 0.0) || !std::isfinite(lateness_s)) return fail("lateness_s: must be >= 0");
  if (!(max_gap_s >= tick_s) || !std::isfinite(max_gap_s)) return fail("max_gap_s: must be at least one tick");
  if (!(max_lead_s >= 0.0) || !std::isfinite(max_lead_s)) return fail("max_lead_s: must be >= 0 (0: off)");
  if (max_lead_s > 0.0 && max_lead_s < lateness_s) return fail("max_lead_s: must be at least the reorder window");
  if (quorum_points < 1) return fail("quorum_points: must be at least 1");
  if (quarantine_capacity < 1) return fail("quarantine_capacity: must be at least 1");
  return true;
}

void TickScheduler::Init(const Options& options, double resume_after_s) {
  options_ = options;
  heap_ = {};
  quarantine_.clear();
  quarantine_min_ = kNaN;
  order_ = 0;
  resume_after_ = resume_after_s;
  newest_ = first_tick_ = kNaN;
  // The previous run's last tick stands until this run computes one: data
  // time for commands and checkpoints right after a restart.
  last_tick_ = resume_after_s;
  next_k_ = 0;
  stopped_ = false;
  dropped_before_resume_ = gaps_jumped_ = quarantined_ = released_ = clock_jumps_ = 0;
}

double TickScheduler::GridCeil(double t) const { return std::ceil(t / options_.tick_s) * options_.tick_s; }

double TickScheduler::data_time_s() const {
  if (std::isfinite(newest_) && std::isfinite(last_tick_)) return std::max(newest_, last_tick_);
  return std::isfinite(newest_) ? newest_ : last_tick_;
}

void TickScheduler::Accept(const Reading& r) {
  if (!(r.time_s <= newest_)) newest_ = r.time_s;
  heap_.push(Item{r, order_++});
}

void TickScheduler::Add(const Reading& r) {
  if (!std::isfinite(r.time_s)) return;
  if (std::isfinite(resume_after_) && r.time_s <= resume_after_) {
    ++dropped_before_resume_;
    return;
  }
  if (options_.max_lead_s <= 0.0) return Accept(r);
  const double now = data_time_s();
  // A cold start with a quorum of one trusts the first reading.
  if (!std::isfinite(now) && options_.quorum_points <= 1) return Accept(r);
  if (std::isfinite(now) && r.time_s <= now + options_.max_lead_s) {
    Accept(r);
    // Quarantined readings the clock has caught up with are dropped: they
    // were stamped ahead by a wrong clock. (Scanned only when the clock has
    // reached the earliest of them.)
    if (!quarantine_.empty() && data_time_s() + options_.max_lead_s >= quarantine_min_) {
      const double limit = data_time_s() + options_.max_lead_s;
      quarantine_.erase(std::remove_if(quarantine_.begin(), quarantine_.end(),
                                       [&](const Reading& q) { return q.time_s <= limit; }),
                        quarantine_.end());
      UpdateQuarantineMin();
    }
    return;
  }
  Quarantine(r);
}

void TickScheduler::Quarantine(const Reading& r) {
  ++quarantined_;
  quarantine_.push_back(r);
  if (quarantine_.size() > options_.quarantine_capacity) quarantine_.pop_front();
  UpdateQuarantineMin();
  // Do enough different points agree with this reading's time?
  const double lead = options_.max_lead_s;
  scratch_points_.clear();
  for (const Reading& q : quarantine_) {
    if (std::fabs(q.time_s - r.time_s) > lead) continue;
    if (std::find(scratch_points_.begin(), scratch_points_.end(), q.point) == scratch_points_.end())
      scratch_points_.push_back(q.point);
  }
  if (static_cast<int>(scratch_points_.size()) < options_.quorum_points) return;
  // Consensus: accept the agreeing cluster, then whatever the new clock
  // covers; an outlier further ahead stays quarantined.
  ++clock_jumps_;
  std::deque<Reading> keep;
  for (const Reading& q : quarantine_) {
    if (std::fabs(q.time_s - r.time_s) <= lead) {
      Accept(q);
      ++released_;
    } else {
      keep.push_back(q);
    }
  }
  quarantine_.clear();
  const double limit = data_time_s() + lead;
  for (const Reading& q : keep) {
    if (q.time_s <= limit) {
      Accept(q);
      ++released_;
    } else {
      quarantine_.push_back(q);
    }
  }
  UpdateQuarantineMin();
}

void TickScheduler::UpdateQuarantineMin() {
  quarantine_min_ = kNaN;
  for (const Reading& q : quarantine_)
    if (!(q.time_s >= quarantine_min_)) quarantine_min_ = q.time_s;
}

// Advances every tick T < t (inclusive: T <= t).
void TickScheduler::AdvanceBefore(double t, bool inclusive, const AdvanceFn& advance) {
  if (!std::isfinite(first_tick_) || stopped_) return;
  double next = first_tick_ + static_cast<double>(next_k_) * options_.tick_s;
  if (t - next > options_.max_gap_s) {
    // Restart the grid max_gap_s before t rather than stepping through it.
    first_tick_ = GridCeil(t - options_.max_gap_s);
    next_k_ = 0;
    next = first_tick_;
    ++gaps_jumped_;
  }
  while (!stopped_ && (inclusive ? next <= t + 1e-9 : next < t)) {
    last_tick_ = next;
    ++next_k_;
    advance(next);
    next = first_tick_ + static_cast<double>(next_k_) * options_.tick_s;
  }
}

void TickScheduler::ReleaseUpTo(double w, const FeedFn& feed, const AdvanceFn& advance) {
  while (!stopped_ && !heap_.empty() && heap_.top().r.time_s <= w) {
    const Reading r = heap_.top().r;
    heap_.pop();
    if (!std::isfinite(first_tick_)) {
      first_tick_ = GridCeil(r.time_s);
      if (std::isfinite(resume_after_) && first_tick_ <= resume_after_) first_tick_ = resume_after_ + options_.tick_s;
      next_k_ = 0;
    }
    AdvanceBefore(r.time_s, false, advance);
    if (stopped_) return;
    feed(r);
  }
  AdvanceBefore(w, true, advance);
}

void TickScheduler::Release(const FeedFn& feed, const AdvanceFn& advance) {
  if (!std::isfinite(newest_)) return;
  ReleaseUpTo(newest_ - options_.lateness_s, feed, advance);
}

void TickScheduler::Flush(const FeedFn& feed, const AdvanceFn& advance) {
  if (!std::isfinite(newest_)) return;
  ReleaseUpTo(newest_, feed, advance);
}

void TickScheduler::AdvanceIdle(double t, const FeedFn& feed, const AdvanceFn& advance) {
  if (!std::isfinite(t)) return;
  if (!std::isfinite(first_tick_) && heap_.empty() && std::isfinite(resume_after_)) {
    // Resumed from a checkpoint and no reading since: tick on after it.
    first_tick_ = resume_after_ + options_.tick_s;
    next_k_ = 0;
  }
  if (!std::isfinite(newest_) && !std::isfinite(first_tick_)) return;
  ReleaseUpTo(t, feed, advance);
}

// ---- RunReplay ----------------------------------------------------------------

bool ReplayOptions::IsValid(std::string* why) const {
  auto fail = [why](const std::string& text) {
    if (why) *why = text;
    return false;
  };
  if (std::isinf(start_s)) return fail("start_s must be finite or NaN");
  if (std::isinf(until_s)) return fail("until_s must be finite or NaN");
  if (!std::isnan(reorder_window_s) && (!(reorder_window_s >= 0.0) || !std::isfinite(reorder_window_s)))
    return fail("reorder_window_s must be >= 0 seconds (NaN: none)");
  if (!(max_lead_s >= 0.0) || !std::isfinite(max_lead_s)) return fail("max_lead_s must be >= 0 seconds (0: off)");
  if (!std::isnan(reorder_window_s) && max_lead_s > 0.0 && max_lead_s < reorder_window_s)
    return fail("max_lead_s must be at least the reorder window");
  if (lead_quorum_points < 1) return fail("lead_quorum_points must be at least 1");
  if (!(max_gap_s > 0.0) || !std::isfinite(max_gap_s)) return fail("max_gap_s must be positive");
  if (std::isfinite(start_s) && std::isfinite(until_s) && until_s < start_s)
    return fail("until_s (" + FormatIsoUtc(until_s, 3) + ") is before start_s (" + FormatIsoUtc(start_s, 3) + ")");
  return true;
}

std::string ReplayResult::ToString() const {
  char buf[384];
  std::snprintf(buf, sizeof buf, "%llu readings fed, %llu before start, %llu ticks (%s .. %s), %llu events%s%s",
                static_cast<unsigned long long>(readings_fed), static_cast<unsigned long long>(readings_before_start),
                static_cast<unsigned long long>(ticks),
                std::isfinite(first_tick_s) ? FormatIsoUtc(first_tick_s, 3).c_str() : "-",
                std::isfinite(last_tick_s) ? FormatIsoUtc(last_tick_s, 3).c_str() : "-",
                static_cast<unsigned long long>(events), reached_until ? ", stopped at until" : "",
                stopped ? ", stopped by the caller" : "");
  std::string s = buf;
  if (quarantined > 0 || gaps_jumped > 0) {
    std::snprintf(buf, sizeof buf, ", %llu quarantined by the lead guard (%llu released by consensus), %llu gaps jumped",
                  static_cast<unsigned long long>(quarantined), static_cast<unsigned long long>(quarantine_released),
                  static_cast<unsigned long long>(gaps_jumped));
    s += buf;
  }
  return s;
}

namespace {

// With a reorder window: the daemon's scheduler, released after every
// reading (as the daemon's file input does), so that the result depends
// only on the readings and their order.
ReplayResult DriveScheduled(ReadingSource* source, double tick_s, int point_count, const ReplayOptions& options,
                            const std::function<void(const Reading&)>& feed_fn,
                            const std::function<bool(double)>& tick_fn) {
  ReplayResult res;
  TickScheduler::Options so;
  so.tick_s = tick_s;
  so.lateness_s = options.reorder_window_s;
  so.max_gap_s = std::max(options.max_gap_s, tick_s);
  so.max_lead_s = options.max_lead_s;
  so.quorum_points = std::max(1, std::min(options.lead_quorum_points, point_count));
  if (!so.IsValid(nullptr)) return res;
  TickScheduler sched;
  sched.Init(so);
  const bool has_start = std::isfinite(options.start_s);
  const bool has_until = std::isfinite(options.until_s);
  auto feed = [&](const Reading& r) {
    feed_fn(r);
    ++res.readings_fed;
  };
  auto advance = [&](double t) {
    if (res.ticks == 0) res.first_tick_s = t;
    res.last_tick_s = t;
    ++res.ticks;
    if (!tick_fn(t)) sched.Stop();
  };
  Reading r;
  while (!sched.stopped() && source->Next(&r)) {
    if (has_start && r.time_s < options.start_s) {
      ++res.readings_before_start;
      continue;
    }
    if (has_until && r.time_s > options.until_s) {
      res.reached_until = true;
      break;
    }
    sched.Add(r);
    sched.Release(feed, advance);
  }
  if (!sched.stopped()) sched.Flush(feed, advance);
  res.stopped = sched.stopped();
  res.quarantined = sched.quarantined() - sched.quarantine_released();
  res.quarantine_released = sched.quarantine_released();
  res.gaps_jumped = sched.gaps_jumped();
  return res;
}

}  // namespace

ReplayResult DriveTicks(ReadingSource* source, double tick_s, int point_count, const ReplayOptions& options,
                        const std::function<void(const Reading&)>& feed, const std::function<bool(double)>& tick_fn) {
  ReplayResult res;
  if (source == nullptr || !feed || !tick_fn || !(tick_s > 0.0) || !std::isfinite(tick_s) ||
      !options.IsValid(nullptr))
    return res;
  if (!std::isnan(options.reorder_window_s)) return DriveScheduled(source, tick_s, point_count, options, feed, tick_fn);
  const bool has_start = std::isfinite(options.start_s);
  const bool has_until = std::isfinite(options.until_s);

  double first_tick = 0.0;
  uint64_t k = 0;  // index of the next tick
  double next_tick = 0.0;
  bool started = false;
  bool go_on = true;
  double last_time = 0.0;

  auto tick = [&](double t) {
    if (res.ticks == 0) res.first_tick_s = t;
    res.last_tick_s = t;
    ++res.ticks;
    ++k;
    next_tick = first_tick + static_cast<double>(k) * tick_s;
    if (!tick_fn(t)) go_on = false;
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
    feed(r);
    ++res.readings_fed;
    if (r.time_s > last_time) last_time = r.time_s;
  }
  if (started) {
    while (go_on && next_tick <= last_time + 1e-9) tick(next_tick);
  }
  res.stopped = !go_on;
  return res;
}

ReplayResult RunReplay(Monitor* monitor, ReadingSource* source, double tick_s, const ReplayOptions& options) {
  if (monitor == nullptr) return ReplayResult{};
  uint64_t events = 0;
  // One tick: advance, hand over the events, then the per-tick callback.
  auto tick = [&](double t) {
    monitor->Advance(t);
    AlarmEvent e;
    while (monitor->PopEvent(&e)) {
      ++events;
      if (options.on_event) options.on_event(e);
    }
    return !options.on_tick || options.on_tick(t);
  };
  ReplayResult res = DriveTicks(source, tick_s, static_cast<int>(monitor->site().points.size()), options,
                                [monitor](const Reading& r) { monitor->Feed(r); }, tick);
  res.events = events;
  return res;
}

}  // namespace holdfast
