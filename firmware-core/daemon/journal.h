// The alarm journal: every alarm event is on disk before it is on the wire,
// and leaves the journal only after the broker acknowledged it.
//
// Files in the journal directory:
//   events.journal  append-only, one record per line:
//                     J2 <seq> <crc32, 8 hex digits> <length> <appended> <topic>\t<payload>\n
//                   crc32 (IEEE 802.3) and length cover "<topic>\t<payload>";
//                   <appended> is the wall time of the append (epoch s, 0 when
//                   not known); fsync'ed after every append, before the event
//                   is published. Records of the first format ("J1", without
//                   <appended>) are still read.
//   acked           "<seq>\n": every record up to seq has been acknowledged by
//                   the broker (PUBACK). Written atomically (atomic_file.h).
//
// Opening reads the journal, checks each record, and cuts the file at the
// first record that is torn (no newline, after a kill -9 or a power cut) or
// damaged (length or checksum wrong): that tail is dropped and counted. A
// record is retired when the broker acknowledged it; the marker moves over
// the longest acknowledged prefix, so retirement is in order even when
// acknowledgements are not.
//
// History: retired records stay in the file (and in memory) for
// history_s of wall time and within history_bytes, so that a client that
// missed events (e.g. inside a broker that crashed before saving them) can
// ask for them again by sequence number (Since). When enough records have
// fallen out of the history the journal is rewritten (atomically) with the
// history and the pending records: compaction.
#pragma once

#include <cstdint>
#include <deque>
#include <string>
#include <string_view>
#include <vector>

namespace holdfast::daemon {

// Creates `dir` and its parents (mode 0750) as needed; false with the
// reason (the directory that could not be made) otherwise.
bool MakeDirs(const std::string& dir, std::string* why);

struct JournalRecord {
  uint64_t seq = 0;  // the event's sequence number, strictly increasing
  std::string topic;
  std::string payload;
  double appended_s = 0.0;  // wall time of the append (epoch s); 0: not known
};

// CRC-32 (IEEE 802.3, reflected, polynomial 0xEDB88320) of `data`.
uint32_t Crc32(std::string_view data);

class Journal {
 public:
  Journal() = default;
  ~Journal();
  Journal(const Journal&) = delete;
  Journal& operator=(const Journal&) = delete;

  struct Options {
    std::string dir;                // created if missing
    std::size_t compact_after = 256;  // records out of the history before a rewrite
    double history_s = 7.0 * 86400.0;          // retired records kept this long (wall clock)
    std::size_t history_bytes = 16u << 20;     // and within this many bytes (topic + payload)
    bool IsValid(std::string* why) const;
  };

  // Loads the journal and the marker; a torn or damaged tail is cut off.
  bool Open(const Options& options, std::string* why);

  // Appends the records (seq strictly increasing, above max_seq()) and
  // fsyncs. False with the reason; nothing is pending then.
  bool Append(const std::vector<JournalRecord>& records, std::string* why);

  // The broker acknowledged `seq`. Unknown or already retired: no-op.
  // Retire = MarkAcked + Commit. MarkAcked only notes it in memory; Commit
  // moves the durable marker over the acknowledged prefix (one atomic write
  // for any number of acknowledgements) and compacts when due.
  bool Retire(uint64_t seq, std::string* why);
  void MarkAcked(uint64_t seq);
  bool Commit(std::string* why);

  // Not yet acknowledged, oldest first.
  std::size_t pending_count() const { return pending_.size(); }
  const JournalRecord& pending(std::size_t i) const { return pending_[i].record; }
  bool pending_acked(std::size_t i) const { return pending_[i].acked; }

  // Records with seq >= from_seq (history and pending), oldest first, at most
  // max_count; returns how many were appended to *out.
  std::size_t Since(uint64_t from_seq, std::size_t max_count, std::vector<JournalRecord>* out) const;
  // The oldest sequence number still kept (history or pending); 0 when none.
  uint64_t oldest_kept_seq() const;
  std::size_t history_count() const { return history_.size(); }
  std::size_t history_bytes() const { return history_bytes_; }

  uint64_t acked_through() const { return acked_through_; }
  uint64_t max_seq() const { return max_seq_; }
  uint64_t dropped_tail_bytes() const { return dropped_tail_bytes_; }
  uint64_t compactions() const { return compactions_; }
  const std::string& path() const { return path_; }

 private:
  struct Entry {
    JournalRecord record;
    bool acked = false;
  };
  bool Compact(std::string* why);
  void AddHistory(JournalRecord r);
  static void Format(const JournalRecord& r, std::string* out);

  Options options_;
  std::string path_, marker_path_;
  int fd_ = -1;
  std::deque<Entry> pending_;
  std::deque<JournalRecord> history_;  // retired, oldest first
  std::size_t history_bytes_ = 0;
  double newest_appended_s_ = 0.0;
  uint64_t acked_through_ = 0, max_seq_ = 0;
  uint64_t dropped_tail_bytes_ = 0, compactions_ = 0;
  std::size_t retired_in_file_ = 0;  // records in the file that left the history
};

}  // namespace holdfast::daemon
