// The one tick loop of every file-driven tool (`holdfast balance`, `replay`,
// `tune`, and later the daemon's file input): readings from a source are fed
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

#include <cstdint>
#include <functional>
#include <string>

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

  std::string ToString() const;  // one line, for logs and test failures
};

// Runs the whole source through the monitor. tick_s must be positive and
// finite; options must be valid (otherwise nothing runs and the result is
// empty; check with ReplayOptions::IsValid first to get the reason).
// Allocates nothing per reading or per tick beyond what the callbacks do.
ReplayResult RunReplay(Monitor* monitor, ReadingSource* source, double tick_s, const ReplayOptions& options);

}  // namespace holdfast
