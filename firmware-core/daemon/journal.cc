#include "journal.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <array>
#include <cerrno>
#include <cinttypes>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>

#include "atomic_file.h"

namespace holdfast::daemon {
namespace {

std::array<uint32_t, 256> MakeCrcTable() {
  std::array<uint32_t, 256> t{};
  for (uint32_t i = 0; i < 256; ++i) {
    uint32_t c = i;
    for (int k = 0; k < 8; ++k) c = (c & 1u) ? 0xEDB88320u ^ (c >> 1) : c >> 1;
    t[i] = c;
  }
  return t;
}


bool WriteAll(int fd, const std::string& s) {
  size_t done = 0;
  while (done < s.size()) {
    const ssize_t n = ::write(fd, s.data() + done, s.size() - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      return false;
    }
    done += static_cast<size_t>(n);
  }
  return true;
}

// Parses an unsigned decimal or hex field ending at `end_char`; advances pos.
bool Field(std::string_view line, size_t* pos, char end_char, int base, uint64_t* out) {
  const size_t end = line.find(end_char, *pos);
  if (end == std::string_view::npos || end == *pos || end - *pos > 20) return false;
  uint64_t v = 0;
  for (size_t i = *pos; i < end; ++i) {
    const char c = line[i];
    int d;
    if (c >= '0' && c <= '9') d = c - '0';
    else if (base == 16 && c >= 'a' && c <= 'f') d = c - 'a' + 10;
    else return false;
    v = v * static_cast<uint64_t>(base) + static_cast<uint64_t>(d);
  }
  *out = v;
  *pos = end + 1;
  return true;
}

}  // namespace

bool MakeDirs(const std::string& dir, std::string* why) {
  std::string cur;
  size_t pos = 0;
  while (pos != std::string::npos) {
    pos = dir.find('/', pos + 1);
    cur = dir.substr(0, pos);
    if (cur.empty()) continue;
    if (::mkdir(cur.c_str(), 0750) != 0 && errno != EEXIST) {
      if (why) *why = cur + ": cannot create the directory: " + std::strerror(errno);
      return false;
    }
  }
  return true;
}

uint32_t Crc32(std::string_view data) {
  static const std::array<uint32_t, 256> table = MakeCrcTable();
  uint32_t c = 0xFFFFFFFFu;
  for (const char ch : data) c = table[(c ^ static_cast<unsigned char>(ch)) & 0xFFu] ^ (c >> 8);
  return c ^ 0xFFFFFFFFu;
}

bool Journal::Options::IsValid(std::string* why) const {
  if (dir.empty()) {
    if (why) *why = "journal dir: required";
    return false;
  }
  if (compact_after < 1) {
    if (why) *why = "journal compact_after: must be at least 1";
    return false;
  }
  return true;
}

Journal::~Journal() {
  if (fd_ >= 0) ::close(fd_);
}

void Journal::Format(const JournalRecord& r, std::string* out) {
  std::string body = r.topic;
  body.push_back('\t');
  body += r.payload;
  char head[112];
  const double t = std::isfinite(r.appended_s) && r.appended_s > 0.0 ? r.appended_s : 0.0;
  std::snprintf(head, sizeof head, "J2 %" PRIu64 " %08" PRIx32 " %zu %.0f ", r.seq, Crc32(body), body.size(), t);
  out->append(head);
  out->append(body);
  out->push_back('\n');
}

bool Journal::Open(const Options& options, std::string* why) {
  if (!options.IsValid(why)) return false;
  if (fd_ >= 0) ::close(fd_);
  fd_ = -1;
  options_ = options;
  pending_.clear();
  history_.clear();
  history_bytes_ = 0;
  newest_appended_s_ = 0.0;
  acked_through_ = max_seq_ = dropped_tail_bytes_ = 0;
  retired_in_file_ = 0;
  if (!MakeDirs(options.dir, why)) return false;
  path_ = options.dir + "/events.journal";
  marker_path_ = options.dir + "/acked";

  std::string marker;
  if (ReadWholeFile(marker_path_, &marker, nullptr)) {
    char* end = nullptr;
    const unsigned long long v = std::strtoull(marker.c_str(), &end, 10);
    if (end == marker.c_str()) {
      if (why) *why = marker_path_ + ": damaged acked marker (expected a sequence number)";
      return false;
    }
    acked_through_ = v;
  }
  std::string content;
  if (!ReadWholeFile(path_, &content, nullptr)) content.clear();
  size_t pos = 0, good_end = 0;
  while (pos < content.size()) {
    const size_t nl = content.find('\n', pos);
    if (nl == std::string::npos) break;  // torn: no newline
    const std::string_view line(content.data() + pos, nl - pos);
    size_t p = 0;
    uint64_t seq = 0, crc = 0, len = 0, appended = 0;
    const bool v2 = line.compare(0, 3, "J2 ") == 0;
    if (!v2 && line.compare(0, 3, "J1 ") != 0) break;
    p = 3;
    if (!Field(line, &p, ' ', 10, &seq) || !Field(line, &p, ' ', 16, &crc) || !Field(line, &p, ' ', 10, &len))
      break;
    if (v2 && !Field(line, &p, ' ', 10, &appended)) break;
    const std::string_view body = line.substr(p);
    if (body.size() != len || Crc32(body) != crc || seq <= max_seq_) break;
    const size_t tab = body.find('\t');
    if (tab == std::string_view::npos) break;
    max_seq_ = seq;
    JournalRecord rec;
    rec.seq = seq;
    rec.topic = std::string(body.substr(0, tab));
    rec.payload = std::string(body.substr(tab + 1));
    rec.appended_s = static_cast<double>(appended);
    if (rec.appended_s > newest_appended_s_) newest_appended_s_ = rec.appended_s;
    if (seq > acked_through_) pending_.push_back(Entry{std::move(rec), false});
    else AddHistory(std::move(rec));
    pos = nl + 1;
    good_end = pos;
  }
  if (acked_through_ > max_seq_) max_seq_ = acked_through_;
  fd_ = ::open(path_.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0640);
  if (fd_ < 0) {
    if (why) *why = path_ + ": cannot open the journal: " + std::strerror(errno);
    return false;
  }
  if (good_end < content.size()) {
    dropped_tail_bytes_ = content.size() - good_end;
    if (::ftruncate(fd_, static_cast<off_t>(good_end)) != 0 || ::fsync(fd_) != 0) {
      if (why) *why = path_ + ": cannot cut the torn tail: " + std::strerror(errno);
      return false;
    }
  }
  if (retired_in_file_ >= options_.compact_after) return Compact(why);
  return true;
}

bool Journal::Append(const std::vector<JournalRecord>& records, std::string* why) {
  if (fd_ < 0) {
    if (why) *why = "journal not open";
    return false;
  }
  std::string buf;
  uint64_t last = max_seq_;
  for (const JournalRecord& r : records) {
    if (r.seq <= last) {
      if (why) *why = path_ + ": sequence " + std::to_string(r.seq) + " not above " + std::to_string(last);
      return false;
    }
    last = r.seq;
    Format(r, &buf);
  }
  if (!WriteAll(fd_, buf) || ::fdatasync(fd_) != 0) {
    if (why) *why = path_ + ": cannot append: " + std::strerror(errno);
    return false;
  }
  for (const JournalRecord& r : records) {
    pending_.push_back(Entry{r, false});
    if (r.appended_s > newest_appended_s_) newest_appended_s_ = r.appended_s;
  }
  max_seq_ = last;
  return true;
}

bool Journal::Retire(uint64_t seq, std::string* why) {
  MarkAcked(seq);
  return Commit(why);
}

void Journal::MarkAcked(uint64_t seq) {
  for (Entry& e : pending_) {
    if (e.record.seq == seq) {
      e.acked = true;
      return;
    }
  }
}

bool Journal::Commit(std::string* why) {
  uint64_t through = acked_through_;
  std::size_t popped = 0;
  for (const Entry& e : pending_) {
    if (!e.acked) break;
    through = e.record.seq;
    ++popped;
  }
  if (popped == 0) return true;
  // The marker first: if it cannot be written the records stay pending.
  if (!WriteFileAtomic(marker_path_, std::to_string(through) + "\n", why)) return false;
  for (std::size_t i = 0; i < popped; ++i) {
    AddHistory(std::move(pending_.front().record));
    pending_.pop_front();
  }
  acked_through_ = through;
  if (retired_in_file_ >= options_.compact_after) return Compact(why);
  return true;
}

bool Journal::Compact(std::string* why) {
  std::string content;
  for (const JournalRecord& r : history_) Format(r, &content);
  for (const Entry& e : pending_) Format(e.record, &content);
  if (!WriteFileAtomic(path_, content, why)) return false;
  if (fd_ >= 0) ::close(fd_);
  fd_ = ::open(path_.c_str(), O_WRONLY | O_APPEND | O_CLOEXEC);
  if (fd_ < 0) {
    if (why) *why = path_ + ": cannot reopen after compaction: " + std::strerror(errno);
    return false;
  }
  retired_in_file_ = 0;
  ++compactions_;
  return true;
}

void Journal::AddHistory(JournalRecord r) {
  history_bytes_ += r.topic.size() + r.payload.size();
  history_.push_back(std::move(r));
  // Out of the history: beyond the byte budget, or appended more than
  // history_s before the newest record (records of unknown age count as old
  // only by size).
  while (!history_.empty()) {
    const JournalRecord& o = history_.front();
    const bool too_big = history_bytes_ > options_.history_bytes;
    const bool too_old = o.appended_s > 0.0 && newest_appended_s_ - o.appended_s > options_.history_s;
    if (!too_big && !too_old) break;
    history_bytes_ -= o.topic.size() + o.payload.size();
    history_.pop_front();
    ++retired_in_file_;
  }
}

std::size_t Journal::Since(uint64_t from_seq, std::size_t max_count, std::vector<JournalRecord>* out) const {
  std::size_t n = 0;
  for (const JournalRecord& r : history_) {
    if (n >= max_count) return n;
    if (r.seq >= from_seq) {
      out->push_back(r);
      ++n;
    }
  }
  for (const Entry& e : pending_) {
    if (n >= max_count) return n;
    if (e.record.seq >= from_seq) {
      out->push_back(e.record);
      ++n;
    }
  }
  return n;
}

uint64_t Journal::oldest_kept_seq() const {
  if (!history_.empty()) return history_.front().seq;
  if (!pending_.empty()) return pending_.front().record.seq;
  return 0;
}

}  // namespace holdfast::daemon
