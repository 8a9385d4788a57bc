// The one tick loop of every file-driven tool (`holdfast balance`, `replay`,
// `tune`, `evaluate`, `district` through DriveTicks; holdfastd through TickScheduler below): readings from a source are fed
// to a Monitor, and the monitor is advanced on the site's tick grid.
//
//   holdfast::ReadingsCsvReader reader;   reader.Open(path, site, &why);
//   holdfast::CsvReadingSource source(&reader);
//   holdfast::ReplayOptions options;
//   options.on_event = [&](const AlarmEvent& e) { ... };   // each alarm event, in order
//   options.on_tick = [&](double t) { ...; return true; }; // after every tick
//   holdfast::ReplayResult r = holdfast::RunReplay(&monitor, &source, site.tick_s, options);
//
// Tick rule (what `holdfast balance` has always done):
//   * the first tick is ceil(t0 / tick) * tick, t0 the time of the first
//     reading fed; tick k is first + k * tick (a product, not a running sum,
//     so the grid does not drift for ticks like 0.1 s);
//   * a reading at time t belongs to the first tick >= t: every tick before
//     t is advanced before the reading is fed, so a reading exactly on a tick
//     is seen by that tick;
//   * after the last reading, ticks continue up to the latest reading time
//     fed (with 1e-9 s of slack), never beyond.
// Readings earlier than the current tick (late, out of order) are fed all the
// same; the monitor's aligner counts and drops them.
//
// start_s / until_s select a stretch of the file: readings before start_s are
// skipped (not fed; the first tick is aligned on the first reading fed), and
// reading stops at the first reading after until_s (the file is streamed and
// not read further). Readings at exactly start_s or until_s are fed.
//
// The driver sleeps nowhere and reads no clock: pacing, progress and output
// live in the callbacks of the tool that calls it. It drains the monitor's
// event ring after every tick; a monitor with an external event sink
// (Monitor::SetEventSink) delivers its events there instead, and on_event is
// then never called.
#pragma once

#include <cmath>
#include <cstdint>
#include <deque>
#include <functional>
#include <queue>
#include <string>
#include <vector>

#include "holdfast/alarm.h"
#include "holdfast/reading.h"
#include "holdfast/site.h"

namespace holdfast {

class Monitor;
class ReadingsCsvReader;

// Anything that yields readings in file order: the CSV reader, a filter over
// it (e.g. a synthetic leak), a test's vector.
class ReadingSource {
 public:
  virtual ~ReadingSource() = default;
  // The next reading; false at the end.
  virtual bool Next(Reading* r) = 0;
  // Bytes consumed so far, for progress reports (0 when not known).
  virtual uint64_t bytes_read() const { return 0; }
};

// A ReadingsCsvReader as a ReadingSource (the reader must outlive it).
class CsvReadingSource final : public ReadingSource {
 public:
  explicit CsvReadingSource(ReadingsCsvReader* reader) : reader_(reader) {}
  bool Next(Reading* r) override;
  uint64_t bytes_read() const override;

 private:
  ReadingsCsvReader* reader_;
};

// Data time with a reorder window and a guard against bad clocks: the one
// scheduler of the daemon (daemon/engine.h) and of the file tools when they
// run with a reorder window (ReplayOptions::reorder_window_s).
//
// Readings are held in a reorder buffer and released, oldest first, once
// data time has moved `lateness_s` past them (the watermark: newest accepted
// reading time minus lateness_s). Between releases the monitor is advanced
// on the site's tick grid with the file tick loop's rule: a reading at time
// t is fed after every tick before t, and a tick T is computed once T <=
// watermark. Readings older than the last computed tick are fed at once (the
// monitor's aligner counts them as late). A jump of data time beyond
// max_gap_s is not stepped tick by tick: the grid restarts max_gap_s before
// the new time.
//
// The lead guard (max_lead_s > 0): data time is the newest accepted reading
// (or the last tick, when that is later). A reading stamped more than
// max_lead_s ahead of it is quarantined: counted, held aside, and it never
// moves the clock. Data time jumps forward only when readings of at least
// `quorum_points` different points agree on the new time (each within
// max_lead_s of the reading that completes the quorum): the consensus of the
// points wins over a single outlier, and a feed that really resumes after an
// outage is followed within one reading per point. The readings of the
// agreeing cluster are then accepted; a quarantined reading the clock later
// catches up with is dropped (its source's clock was wrong when it was
// stamped). Before the first consensus (a cold start) every reading waits in
// quarantine, so that a first reading from a bad clock cannot set the clock.
// The quarantine holds at most quarantine_capacity readings (oldest dropped).
class TickScheduler {
 public:
  struct Options {
    double tick_s = 1.0;               // the site's tick
    double lateness_s = 2.0;           // reorder window, data time, s
    double max_gap_s = 6.0 * 3600.0;   // larger jumps restart the grid, s
    double max_lead_s = 0.0;           // lead guard, s ahead of data time; 0: off
    int quorum_points = 2;             // points that must agree to move the clock past the lead
    std::size_t quarantine_capacity = 4096;
    bool IsValid(std::string* why) const;
  };
  using FeedFn = std::function<void(const Reading&)>;
  using AdvanceFn = std::function<void(double tick_s)>;

  // `resume_after_s`: the last tick of a previous run (from a checkpoint);
  // readings at or before it are dropped (counted) and ticks stay after it.
  // NaN: a cold start.
  void Init(const Options& options, double resume_after_s = kNaN);

  void Add(const Reading& r);
  // Feeds and ticks everything up to the watermark.
  void Release(const FeedFn& feed, const AdvanceFn& advance);
  // End of input (file mode): releases everything and ticks up to the newest
  // accepted reading, as the file tick loop does.
  void Flush(const FeedFn& feed, const AdvanceFn& advance);
  // No readings are coming (the daemon's dead-feed watchdog): feeds what is
  // buffered up to t and ticks up to t (a no-op before the first reading of
  // a cold start; after a resume, ticks go on from the resumed tick).
  // Readings stamped before t that arrive later are late.
  void AdvanceIdle(double t, const FeedFn& feed, const AdvanceFn& advance);
  // Stops ticking (a callback may call it): nothing more is fed or ticked.
  void Stop() { stopped_ = true; }
  bool stopped() const { return stopped_; }

  // The last tick computed (by this run, or by the run resumed from); NaN before any.
  double last_tick_s() const { return last_tick_; }
  double first_tick_s() const { return first_tick_; }
  double newest_s() const { return newest_; }  // newest accepted reading time
  // Data time for the lead guard: the later of newest_s() and last_tick_s().
  double data_time_s() const;
  std::size_t buffered() const { return heap_.size(); }
  std::size_t quarantine_size() const { return quarantine_.size(); }
  uint64_t dropped_before_resume() const { return dropped_before_resume_; }
  uint64_t gaps_jumped() const { return gaps_jumped_; }
  uint64_t quarantined() const { return quarantined_; }             // readings that entered quarantine
  uint64_t quarantine_released() const { return released_; }        // of those, accepted by a consensus
  uint64_t clock_jumps() const { return clock_jumps_; }             // consensus moves past the lead

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
  void Accept(const Reading& r);
  void Quarantine(const Reading& r);
  void UpdateQuarantineMin();
  void AdvanceBefore(double t, bool inclusive, const AdvanceFn& advance);
  void ReleaseUpTo(double w, const FeedFn& feed, const AdvanceFn& advance);

  Options options_;
  std::priority_queue<Item, std::vector<Item>, Later> heap_;
  std::deque<Reading> quarantine_;
  double quarantine_min_ = kNaN;  // earliest time in the quarantine
  std::vector<int32_t> scratch_points_;
  uint64_t order_ = 0;
  double resume_after_ = kNaN;
  double newest_ = kNaN;
  double first_tick_ = kNaN;  // grid origin
  int64_t next_k_ = 0;        // next tick = first_tick_ + next_k_ * tick_s
  double last_tick_ = kNaN;
  bool stopped_ = false;
  uint64_t dropped_before_resume_ = 0, gaps_jumped_ = 0;
  uint64_t quarantined_ = 0, released_ = 0, clock_jumps_ = 0;
};

// The daemon's defaults for the file tools (config/DAEMON.md, REPLAY.md).
inline constexpr double kDefaultReorderWindow_s = 2.0;
inline constexpr double kDefaultMaxLead_s = 60.0;
inline constexpr double kDefaultMaxGap_s = 6.0 * 3600.0;
inline constexpr int kDefaultLeadQuorumPoints = 2;

struct ReplayOptions {
  // Readings before this time (epoch s) are skipped. NaN: from the first reading.
  double start_s = kNaN;
  // Reading stops at the first reading after this time (epoch s). NaN: to the end.
  double until_s = kNaN;
  // Called once per alarm event, oldest first, right after the tick that
  // raised it and before on_tick for that tick. May be empty.
  std::function<void(const AlarmEvent&)> on_event;
  // Called after every tick with its time (the monitor holds the tick's
  // results). Return false to stop the run (no further reading or tick).
  // May be empty.
  std::function<bool(double tick_s)> on_tick;

  // Reorder window, data time, s (TickScheduler above; the daemon's
  // tick_lateness_s). NaN (the default here): no scheduler, readings are fed
  // in file order by the plain tick loop described at the top. `holdfast
  // replay` and `balance` set it to the daemon's default, so that the three
  // give the same events on the same file.
  double reorder_window_s = kNaN;
  // With a reorder window: the lead guard (0: off), the points that must
  // agree to move data time past it (capped at the site's point count), and
  // the gap beyond which the tick grid jumps instead of stepping.
  double max_lead_s = 0.0;
  int lead_quorum_points = kDefaultLeadQuorumPoints;
  double max_gap_s = kDefaultMaxGap_s;

  bool IsValid(std::string* why) const;  // false, with the reason, when unusable
};

struct ReplayResult {
  uint64_t readings_fed = 0;
  uint64_t readings_before_start = 0;  // skipped by start_s
  uint64_t ticks = 0;
  uint64_t events = 0;                 // passed to on_event
  double first_tick_s = kNaN;          // NaN when no tick ran
  double last_tick_s = kNaN;
  bool reached_until = false;          // a reading after until_s ended the reading
  bool stopped = false;                // on_tick returned false
  // With a reorder window: readings quarantined by the lead guard (never fed),
  // of them released by a consensus of points, and gaps jumped.
  uint64_t quarantined = 0;
  uint64_t quarantine_released = 0;
  uint64_t gaps_jumped = 0;

  std::string ToString() const;  // one line, for logs and test failures
};

// The data-time driver itself, for any consumer of readings and ticks: the
// tick rule above (or, with options.reorder_window_s, TickScheduler),
// start_s / until_s, and the counts of the result. `feed` takes each
// reading; `tick` runs one tick and returns false to stop. `point_count`
// caps the lead guard's quorum. options.on_event and on_tick are not used
// here (RunReplay wires them into `tick`); events stays 0.
ReplayResult DriveTicks(ReadingSource* source, double tick_s, int point_count, const ReplayOptions& options,
                        const std::function<void(const Reading&)>& feed, const std::function<bool(double)>& tick);

// Runs the whole source through the monitor. tick_s must be positive and
// finite; options must be valid (otherwise nothing runs and the result is
// empty; check with ReplayOptions::IsValid first to get the reason).
// Allocates nothing per reading or per tick beyond what the callbacks do.
ReplayResult RunReplay(Monitor* monitor, ReadingSource* source, double tick_s, const ReplayOptions& options);

}  // namespace holdfast
