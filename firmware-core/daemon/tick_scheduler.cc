#include "tick_scheduler.h"

namespace holdfast::daemon {

bool TickScheduler::Options::IsValid(std::string* why) const {
  if (!(tick_s > 0.0) || !std::isfinite(tick_s)) {
    if (why) *why = "tick_s: must be positive";
    return false;
  }
  if (!(lateness_s >= 0.0) || !std::isfinite(lateness_s)) {
    if (why) *why = "lateness_s: must be >= 0";
    return false;
  }
  if (!(max_gap_s >= tick_s) || !std::isfinite(max_gap_s)) {
    if (why) *why = "max_gap_s: must be at least one tick";
    return false;
  }
  return true;
}

void TickScheduler::Init(const Options& options, double resume_after_s) {
  options_ = options;
  heap_ = {};
  order_ = 0;
  resume_after_ = resume_after_s;
  newest_ = first_tick_ = std::nan("");
  // The previous run's last tick stands until this run computes one: data
  // time for commands and checkpoints right after a restart.
  last_tick_ = resume_after_s;
  next_k_ = 0;
  dropped_before_resume_ = gaps_jumped_ = 0;
}

double TickScheduler::GridCeil(double t) const { return std::ceil(t / options_.tick_s) * options_.tick_s; }

void TickScheduler::Add(const Reading& r) {
  if (!std::isfinite(r.time_s)) return;
  if (std::isfinite(resume_after_) && r.time_s <= resume_after_) {
    ++dropped_before_resume_;
    return;
  }
  if (!(r.time_s <= newest_)) newest_ = r.time_s;
  heap_.push(Item{r, order_++});
}

// Advances every tick T < t (inclusive: T <= t).
void TickScheduler::AdvanceBefore(double t, bool inclusive, const AdvanceFn& advance) {
  if (!std::isfinite(first_tick_)) return;
  double next = first_tick_ + static_cast<double>(next_k_) * options_.tick_s;
  if (t - next > options_.max_gap_s) {
    // Restart the grid max_gap_s before t rather than stepping through it.
    first_tick_ = GridCeil(t - options_.max_gap_s);
    next_k_ = 0;
    next = first_tick_;
    ++gaps_jumped_;
  }
  while (inclusive ? next <= t + 1e-9 : next < t) {
    advance(next);
    last_tick_ = next;
    ++next_k_;
    next = first_tick_ + static_cast<double>(next_k_) * options_.tick_s;
  }
}

void TickScheduler::ReleaseUpTo(double w, const FeedFn& feed, const AdvanceFn& advance) {
  while (!heap_.empty() && heap_.top().r.time_s <= w) {
    const Reading r = heap_.top().r;
    heap_.pop();
    if (!std::isfinite(first_tick_)) {
      first_tick_ = GridCeil(r.time_s);
      if (std::isfinite(resume_after_) && first_tick_ <= resume_after_) first_tick_ = resume_after_ + options_.tick_s;
      next_k_ = 0;
    }
    AdvanceBefore(r.time_s, false, advance);
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

}  // namespace holdfast::daemon
