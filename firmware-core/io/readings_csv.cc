#include "readings_csv.h"

#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstring>

namespace holdfast {
namespace {

constexpr size_t kBlock = 1 << 20;
constexpr size_t kMaxErrorsKept = 100;
constexpr size_t kMaxLine = 4096;

// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's
// days_from_civil algorithm).
int64_t DaysFromCivil(int64_t y, unsigned m, unsigned d) {
  y -= m <= 2;
  const int64_t era = (y >= 0 ? y : y - 399) / 400;
  const unsigned yoe = static_cast<unsigned>(y - era * 400);
  const unsigned doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + static_cast<int64_t>(doe) - 719468;
}

void CivilFromDays(int64_t z, int64_t* y, unsigned* m, unsigned* d) {
  z += 719468;
  const int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const unsigned doe = static_cast<unsigned>(z - era * 146097);
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  const int64_t yy = static_cast<int64_t>(yoe) + era * 400;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const unsigned mp = (5 * doy + 2) / 153;
  *d = doy - (153 * mp + 2) / 5 + 1;
  *m = mp < 10 ? mp + 3 : mp - 9;
  *y = yy + (*m <= 2);
}

bool IsLeapYear(int y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }

int DaysInMonth(int y, int m) {
  static const int kDays[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return m == 2 && IsLeapYear(y) ? 29 : kDays[m - 1];
}

bool Digits(std::string_view s, size_t pos, size_t n, int* out) {
  if (pos > s.size() || n > s.size() - pos) return false;
  int v = 0;
  for (size_t i = 0; i < n; ++i) {
    const char c = s[pos + i];
    if (c < '0' || c > '9') return false;
    v = v * 10 + (c - '0');
  }
  *out = v;
  return true;
}

std::string_view Trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t' || s.back() == '\r')) s.remove_suffix(1);
  return s;
}

bool ParseDouble(std::string_view s, double* out) {
  if (s.empty()) return false;
  const char* b = s.data();
  if (*b == '+') {
    ++b;
    if (b == s.data() + s.size() || *b == '+' || *b == '-') return false;  // "+", "+-5"
  }
  const auto res = std::from_chars(b, s.data() + s.size(), *out);
  return res.ec == std::errc() && res.ptr == s.data() + s.size();
}

// Seconds of the day and offset part of an ISO time "HH:MM:SS[.fff][Z|+hh:mm]".
bool ParseClock(std::string_view s, double* seconds) {
  int hh, mm, ss;
  if (!Digits(s, 0, 2, &hh) || s.size() < 8 || s[2] != ':' || !Digits(s, 3, 2, &mm) || s[5] != ':' ||
      !Digits(s, 6, 2, &ss))
    return false;
  if (hh > 23 || mm > 59 || ss > 60) return false;
  size_t pos = 8;
  double frac = 0.0;
  if (pos < s.size() && (s[pos] == '.' || s[pos] == ',')) {
    ++pos;
    double scale = 0.1;
    const size_t start = pos;
    while (pos < s.size() && s[pos] >= '0' && s[pos] <= '9') {
      frac += (s[pos] - '0') * scale;
      scale *= 0.1;
      ++pos;
    }
    if (pos == start) return false;
  }
  double offset = 0.0;
  if (pos < s.size()) {
    if (s[pos] == 'Z' || s[pos] == 'z') {
      ++pos;
    } else if (s[pos] == '+' || s[pos] == '-') {
      const int sign = s[pos] == '+' ? 1 : -1;
      int oh, om = 0;
      if (!Digits(s, pos + 1, 2, &oh)) return false;
      size_t q = pos + 3;
      if (q < s.size() && s[q] == ':') {
        ++q;
        if (!Digits(s, q, 2, &om)) return false;  // "+02:" needs its minutes
        q += 2;
      } else if (q < s.size()) {
        if (!Digits(s, q, 2, &om)) return false;
        q += 2;
      }
      if (oh > 23 || om > 59) return false;
      offset = sign * (oh * 3600.0 + om * 60.0);
      pos = q;
    } else {
      return false;
    }
  } else {
    return false;  // a time without a zone is ambiguous: UTC must be explicit
  }
  if (pos != s.size()) return false;
  *seconds = hh * 3600.0 + mm * 60.0 + ss + frac - offset;
  return true;
}

}  // namespace

bool ParseTime(std::string_view text, double* epoch_s) {
  text = Trim(text);
  if (text.size() >= 11 && text[4] == '-' && (text[10] == 'T' || text[10] == ' ')) {
    int y, mo, d;
    if (!Digits(text, 0, 4, &y) || !Digits(text, 5, 2, &mo) || text[7] != '-' || !Digits(text, 8, 2, &d))
      return false;
    if (mo < 1 || mo > 12 || d < 1 || d > DaysInMonth(y, mo)) return false;
    double sec;
    if (!ParseClock(text.substr(11), &sec)) return false;
    *epoch_s = static_cast<double>(DaysFromCivil(y, static_cast<unsigned>(mo), static_cast<unsigned>(d))) * 86400.0 + sec;
    return true;
  }
  double v;
  if (!ParseDouble(text, &v) || !std::isfinite(v)) return false;
  *epoch_s = v;
  return true;
}

std::string FormatIsoUtc(double epoch_s, int decimals) {
  if (decimals < 0) decimals = 0;
  if (decimals > 6) decimals = 6;
  const double scale = std::pow(10.0, decimals);
  const double total = std::round(epoch_s * scale);
  const int64_t units_per_day = static_cast<int64_t>(86400.0 * scale);
  int64_t t = static_cast<int64_t>(total);
  int64_t day = t / units_per_day;
  int64_t rem = t % units_per_day;
  if (rem < 0) { rem += units_per_day; --day; }
  int64_t y; unsigned m, d;
  CivilFromDays(day, &y, &m, &d);
  const int64_t scale_i = static_cast<int64_t>(scale);
  const int64_t secs = rem / scale_i;
  const int64_t frac = rem % scale_i;
  char buf[48];
  int n = std::snprintf(buf, sizeof buf, "%04lld-%02u-%02uT%02lld:%02lld:%02lld", static_cast<long long>(y), m, d,
                        static_cast<long long>(secs / 3600), static_cast<long long>((secs / 60) % 60),
                        static_cast<long long>(secs % 60));
  if (decimals > 0) n += std::snprintf(buf + n, sizeof buf - static_cast<size_t>(n), ".%0*lld", decimals, static_cast<long long>(frac));
  std::snprintf(buf + n, sizeof buf - static_cast<size_t>(n), "Z");
  return buf;
}

bool ParseQuality(std::string_view text, Quality* q) {
  text = Trim(text);
  if (text.empty() || text == "good") { *q = Quality::kGood; return true; }
  if (text == "uncertain") { *q = Quality::kUncertain; return true; }
  if (text == "bad") { *q = Quality::kBad; return true; }
  return false;
}

ReadingsCsvReader::~ReadingsCsvReader() {
  if (file_ && owns_file_) std::fclose(file_);
}

bool ReadingsCsvReader::Open(const std::string& path, const Site& site, std::string* why) {
  // A reader may be reopened: forget the previous file entirely.
  if (file_ && owns_file_) std::fclose(file_);
  file_ = nullptr;
  owns_file_ = false;
  begin_ = end_ = 0;
  eof_ = false;
  line_ = rows_ = bad_rows_ = bytes_read_ = 0;
  errors_.clear();
  last_id_.clear();
  last_index_ = -1;
  have_date_ = false;
  path_ = path;
  if (path == "-") {
    file_ = stdin;
    owns_file_ = false;
  } else {
    file_ = std::fopen(path.c_str(), "rb");
    owns_file_ = true;
    if (!file_) {
      if (why) *why = path + ": cannot open: " + std::strerror(errno);
      return false;
    }
  }
  buf_.resize(kBlock + kMaxLine);
  points_.clear();
  for (size_t i = 0; i < site.points.size(); ++i) points_.emplace(site.points[i].id, static_cast<int>(i));
  std::string_view header;
  while (NextLine(&header)) {
    header = Trim(header);
    if (header.empty() || header.front() == '#') continue;
    if (header.size() >= 3 && static_cast<unsigned char>(header[0]) == 0xEF) header.remove_prefix(3);  // BOM
    if (header == "time,point,value,quality" || header == "time,point,value") return true;
    if (why) *why = path + ":" + std::to_string(line_) + ": header must be 'time,point,value,quality' (got '" +
                    std::string(header.substr(0, 80)) + "')";
    return false;
  }
  if (why) *why = path + ": empty file (no header 'time,point,value,quality')";
  return false;
}

bool ReadingsCsvReader::NextLine(std::string_view* out) {
  // A line longer than the limit is a bad row (counted in rows() too).
  const auto long_line = [this] {
    ++rows_;
    Bad("line longer than " + std::to_string(kMaxLine) + " bytes");
  };
  for (;;) {
    const char* start = buf_.data() + begin_;
    const void* nl = std::memchr(start, '\n', end_ - begin_);
    if (nl != nullptr || (eof_ && begin_ < end_)) {
      // A complete line (or the last one, without a newline).
      const size_t len = nl != nullptr ? static_cast<size_t>(static_cast<const char*>(nl) - start)
                                       : end_ - begin_;
      begin_ += nl != nullptr ? len + 1 : len;
      ++line_;
      const size_t text_len = len > 0 && start[len - 1] == '\r' ? len - 1 : len;
      if (text_len > kMaxLine) {
        // Too long, though it fitted in the buffer: the same verdict as below.
        long_line();
        continue;
      }
      *out = std::string_view(start, len);
      return true;
    }
    if (eof_) return false;
    const size_t rest = end_ - begin_;
    if (rest > kMaxLine) {
      // A line longer than the limit whose end is not in the buffer yet:
      // report it and skip to its end (the buffer never grows).
      ++line_;
      long_line();
      begin_ = end_ = 0;
      for (;;) {
        const size_t got = std::fread(buf_.data(), 1, kBlock, file_);
        bytes_read_ += got;
        if (got == 0) {
          eof_ = true;
          break;
        }
        const void* p = std::memchr(buf_.data(), '\n', got);
        if (p != nullptr) {
          begin_ = static_cast<size_t>(static_cast<const char*>(p) - buf_.data()) + 1;
          end_ = got;
          break;
        }
      }
      continue;
    }
    // Move the partial line (at most kMaxLine bytes) to the front and read
    // the next block behind it; the buffer holds kBlock + kMaxLine bytes.
    std::memmove(buf_.data(), start, rest);
    begin_ = 0;
    end_ = rest;
    const size_t got = std::fread(buf_.data() + end_, 1, kBlock, file_);
    bytes_read_ += got;
    end_ += got;
    if (got == 0) eof_ = true;
  }
}

void ReadingsCsvReader::Bad(const std::string& why) {
  ++bad_rows_;
  if (errors_.size() < kMaxErrorsKept) errors_.push_back({line_, why});
}

bool ReadingsCsvReader::ParseRow(std::string_view line, Reading* r, std::string* why) {
  // Split into at most four fields.
  std::string_view f[4];
  int nf = 0;
  size_t pos = 0;
  while (nf < 4) {
    const size_t comma = line.find(',', pos);
    if (comma == std::string_view::npos) {
      f[nf++] = line.substr(pos);
      break;
    }
    f[nf++] = line.substr(pos, comma - pos);
    pos = comma + 1;
    if (nf == 4) { *why = "too many fields (expected time,point,value,quality)"; return false; }
  }
  if (nf < 3) { *why = "expected time,point,value[,quality]"; return false; }
  const std::string_view tf = Trim(f[0]);
  // Fast path for ISO times on the same date as the previous row.
  bool time_ok = false;
  if (have_date_ && tf.size() >= 20 && tf[10] == 'T' && std::memcmp(tf.data(), last_date_, 10) == 0) {
    double sec;
    if (ParseClock(tf.substr(11), &sec)) {
      r->time_s = static_cast<double>(last_day_) * 86400.0 + sec;
      time_ok = true;
    }
  }
  if (!time_ok) {
    if (!ParseTime(tf, &r->time_s)) { *why = "bad time '" + std::string(tf.substr(0, 40)) + "'"; return false; }
    if (tf.size() >= 20 && tf[10] == 'T') {
      std::memcpy(last_date_, tf.data(), 10);
      int y, mo, d;
      Digits(tf, 0, 4, &y); Digits(tf, 5, 2, &mo); Digits(tf, 8, 2, &d);
      last_day_ = DaysFromCivil(y, static_cast<unsigned>(mo), static_cast<unsigned>(d));
      have_date_ = true;
    }
  }
  const std::string_view id = Trim(f[1]);
  if (id.size() == last_id_.size() && id == last_id_) {
    r->point = last_index_;
  } else {
    key_.assign(id.data(), id.size());
    const auto it = points_.find(key_);
    if (it == points_.end()) { *why = "unknown point '" + key_ + "'"; return false; }
    r->point = it->second;
    last_id_ = key_;
    last_index_ = it->second;
  }
  const std::string_view vf = Trim(f[2]);
  if (!ParseDouble(vf, &r->value) || !std::isfinite(r->value)) {
    *why = "bad value '" + std::string(vf.substr(0, 40)) + "'";
    return false;
  }
  r->quality = Quality::kGood;
  if (nf == 4 && !ParseQuality(f[3], &r->quality)) {
    *why = "bad quality '" + std::string(Trim(f[3]).substr(0, 20)) + "' (good, uncertain or bad)";
    return false;
  }
  return true;
}

bool ReadingsCsvReader::Next(Reading* r) {
  std::string_view line;
  std::string why;
  while (NextLine(&line)) {
    if (line.empty() || line.front() == '#' || Trim(line).empty()) continue;
    ++rows_;
    if (ParseRow(line, r, &why)) return true;
    Bad(why);
  }
  return false;
}

}  // namespace holdfast
