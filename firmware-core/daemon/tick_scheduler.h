// Data time drives the monitor. Readings arrive from many sources, slightly
// out of order; the scheduler holds them in a reorder buffer and releases
// them, oldest first, once data time has moved `lateness_s` past them
// (the watermark: newest reading time seen minus lateness_s). Between
// releases it advances the monitor on the site's tick grid with the rule of
// the file tick loop (io/replay_driver.h): a reading at time t is fed after
// every tick before t, and a tick T is computed once T <= watermark. With
// readings in order the daemon therefore computes exactly what
// `holdfast replay` computes on the same readings.
//
// Readings older than the last computed tick are fed at once (the monitor's
// aligner counts them as late). A jump of data time beyond max_gap_s is not
// stepped tick by tick: the grid restarts max_gap_s before the new time.
#pragma once

#include <cmath>
#include <cstdint>
#include <functional>
#include <queue>
#include <string>
#include <vector>

#include "holdfast/reading.h"

namespace holdfast::daemon {

class TickScheduler {
 public:
  struct Options {
    double tick_s = 1.0;          // the site's tick
    double lateness_s = 2.0;      // reorder window, data time
    double max_gap_s = 6.0 * 3600.0;
    bool IsValid(std::string* why) const;
  };
  using FeedFn = std::function<void(const Reading&)>;
  using AdvanceFn = std::function<void(double tick_s)>;

  // `resume_after_s`: the last tick of a previous run (from a checkpoint);
  // readings at or before it are dropped (counted) and ticks stay after it.
  // NaN: a cold start.
  void Init(const Options& options, double resume_after_s = std::nan(""));

  void Add(const Reading& r);
  // Feeds and ticks everything up to the watermark.
  void Release(const FeedFn& feed, const AdvanceFn& advance);
  // End of input (file mode): releases everything and ticks up to the newest
  // reading, as the file tick loop does.
  void Flush(const FeedFn& feed, const AdvanceFn& advance);

  // The last tick computed (by this run, or by the run resumed from); NaN before any.
  double last_tick_s() const { return last_tick_; }
  double newest_s() const { return newest_; }           // newest reading time seen
  std::size_t buffered() const { return heap_.size(); }
  uint64_t dropped_before_resume() const { return dropped_before_resume_; }
  uint64_t gaps_jumped() const { return gaps_jumped_; }

 private:
  struct Item {
    Reading r;
    uint64_t order;
  };
  struct Later {
    bool operator()(const Item& a, const Item& b) const {
      return a.r.time_s > b.r.time_s || (a.r.time_s == b.r.time_s && a.order > b.order);
    }
  };
  double GridCeil(double t) const;
  void AdvanceBefore(double t, bool inclusive, const AdvanceFn& advance);
  void ReleaseUpTo(double w, const FeedFn& feed, const AdvanceFn& advance);

  Options options_;
  std::priority_queue<Item, std::vector<Item>, Later> heap_;
  uint64_t order_ = 0;
  double resume_after_ = std::nan("");
  double newest_ = std::nan("");
  double first_tick_ = std::nan("");  // grid origin
  int64_t next_k_ = 0;                // next tick = first_tick_ + next_k_ * tick_s
  double last_tick_ = std::nan("");
  uint64_t dropped_before_resume_ = 0, gaps_jumped_ = 0;
};

}  // namespace holdfast::daemon
