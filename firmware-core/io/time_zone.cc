// See time_zone.h.
#include "time_zone.h"

#include <cctype>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <fstream>
#include <iterator>
#include <string>
#include <vector>

namespace holdfast {
namespace {

constexpr double kDay_s = 86400.0;

// Hinnant's civil_from_days (inverse of DaysFromCivil).
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
  *y = yy + (*m <= 2 ? 1 : 0);
}

bool Leap(int64_t y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }

struct Rule {
  char kind = 'M';  // 'M' month.week.day, 'J' Julian 1..365 without Feb 29, 'N' zero-based day 0..365
  int month = 0, week = 0, wday = 0, day = 0;
  double time_s = 7200.0;  // local time of the change (default 02:00:00)
};

class Parser {
 public:
  explicit Parser(const std::string& s) : s_(s) {}
  bool Name(std::string* out) {
    if (i_ < s_.size() && s_[i_] == '<') {
      const size_t e = s_.find('>', i_);
      if (e == std::string::npos) return false;
      *out = s_.substr(i_ + 1, e - i_ - 1);
      i_ = e + 1;
      return out->size() >= 3;
    }
    const size_t b = i_;
    while (i_ < s_.size() && std::isalpha(static_cast<unsigned char>(s_[i_]))) ++i_;
    *out = s_.substr(b, i_ - b);
    return out->size() >= 3;
  }
  // [+-]hh[:mm[:ss]], hours up to 167 (RFC 8536 extension for rule times).
  bool Time(double* out) {
    int sign = 1;
    if (i_ < s_.size() && (s_[i_] == '+' || s_[i_] == '-')) sign = s_[i_++] == '-' ? -1 : 1;
    double parts[3] = {0, 0, 0};
    for (int k = 0; k < 3; ++k) {
      if (k > 0) {
        if (i_ >= s_.size() || s_[i_] != ':') break;
        ++i_;
      }
      int v = 0, n = 0;
      while (i_ < s_.size() && std::isdigit(static_cast<unsigned char>(s_[i_])) && n < 3) v = v * 10 + (s_[i_++] - '0'), ++n;
      if (n == 0) return false;
      parts[k] = v;
    }
    if (parts[0] > 167 || parts[1] > 59 || parts[2] > 59) return false;
    *out = sign * (parts[0] * 3600.0 + parts[1] * 60.0 + parts[2]);
    return true;
  }
  bool Int(int* out) {
    int v = 0, n = 0;
    while (i_ < s_.size() && std::isdigit(static_cast<unsigned char>(s_[i_])) && n < 4) v = v * 10 + (s_[i_++] - '0'), ++n;
    *out = v;
    return n > 0;
  }
  bool RuleSpec(Rule* r) {
    if (i_ >= s_.size()) return false;
    if (s_[i_] == 'M') {
      ++i_;
      r->kind = 'M';
      if (!Int(&r->month) || !Eat('.') || !Int(&r->week) || !Eat('.') || !Int(&r->wday)) return false;
      if (r->month < 1 || r->month > 12 || r->week < 1 || r->week > 5 || r->wday > 6) return false;
    } else if (s_[i_] == 'J') {
      ++i_;
      r->kind = 'J';
      if (!Int(&r->day) || r->day < 1 || r->day > 365) return false;
    } else {
      r->kind = 'N';
      if (!Int(&r->day) || r->day > 365) return false;
    }
    if (i_ < s_.size() && s_[i_] == '/') {
      ++i_;
      if (!Time(&r->time_s)) return false;
    }
    return true;
  }
  bool Eat(char c) {
    if (i_ < s_.size() && s_[i_] == c) {
      ++i_;
      return true;
    }
    return false;
  }
  bool Done() const { return i_ == s_.size(); }
  bool AtEnd() const { return i_ >= s_.size(); }
  char Peek() const { return i_ < s_.size() ? s_[i_] : '\0'; }

 private:
  const std::string& s_;
  size_t i_ = 0;
};

// Local day (days since 1970) on which a rule falls in year y.
int64_t RuleDay(const Rule& r, int64_t y) {
  if (r.kind == 'J') {
    int doy = r.day - 1;  // Feb 29 is never counted
    if (Leap(y) && r.day >= 60) ++doy;
    return DaysFromCivil(y, 1, 1) + doy;
  }
  if (r.kind == 'N') return DaysFromCivil(y, 1, 1) + r.day;
  // Day wday of week `week` (5 = last) of month.
  const int64_t first = DaysFromCivil(y, static_cast<unsigned>(r.month), 1);
  const int first_wd = static_cast<int>(((first + 4) % 7 + 7) % 7);
  int64_t day = first + ((r.wday - first_wd) % 7 + 7) % 7 + 7 * (r.week - 1);
  static const int kLen[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  const int len = kLen[r.month - 1] + (r.month == 2 && Leap(y) ? 1 : 0);
  while (day >= first + len) day -= 7;
  return day;
}

uint32_t Be32(const unsigned char* p) {
  return (uint32_t{p[0]} << 24) | (uint32_t{p[1]} << 16) | (uint32_t{p[2]} << 8) | uint32_t{p[3]};
}
int64_t Be64(const unsigned char* p) {
  return static_cast<int64_t>((uint64_t{Be32(p)} << 32) | uint64_t{Be32(p + 4)});
}

// RFC 8536 TZif: returns transitions and offsets and the footer rule.
bool ReadTzif(const std::string& path, water::UtcOffsetSchedule* out, std::string* footer, std::string* why) {
  std::ifstream f(path, std::ios::binary);
  if (!f) {
    *why = "cannot read " + path;
    return false;
  }
  const std::string data((std::istreambuf_iterator<char>(f)), std::istreambuf_iterator<char>());
  const auto* b = reinterpret_cast<const unsigned char*>(data.data());
  const size_t n = data.size();
  auto bad = [&](const char* m) {
    *why = path + ": not a TZif file (" + m + ")";
    return false;
  };
  if (n < 44 || data.compare(0, 4, "TZif") != 0) return bad("no TZif header");
  const char version = data[4];
  auto counts = [&](size_t at, uint32_t c[6]) {
    for (int k = 0; k < 6; ++k) c[k] = Be32(b + at + 20 + 4 * k);
  };
  uint32_t c[6];  // isutcnt, isstdcnt, leapcnt, timecnt, typecnt, charcnt
  counts(0, c);
  size_t at = 44;
  int tsize = 4;
  if (version >= '2') {
    // Skip the version 1 block to the 64-bit one.
    at += c[3] * 4 + c[3] + c[4] * 6 + c[5] + c[2] * 8 + c[1] + c[0];
    if (at + 44 > n || data.compare(at, 4, "TZif") != 0) return bad("no second header");
    counts(at, c);
    at += 44;
    tsize = 8;
  }
  const size_t need = c[3] * tsize + c[3] + c[4] * 6 + c[5] + c[2] * (tsize + 4) + c[1] + c[0];
  if (at + need > n || c[4] == 0) return bad("truncated");
  const unsigned char* times = b + at;
  const unsigned char* idx = times + c[3] * tsize;
  const unsigned char* types = idx + c[3];
  auto utoff = [&](unsigned t) { return static_cast<double>(static_cast<int32_t>(Be32(types + 6 * t))); };
  out->from_s.clear();
  out->offset_s.clear();
  out->fixed_offset_s = utoff(0);
  for (uint32_t i = 0; i < c[3]; ++i) {
    const double t = tsize == 8 ? static_cast<double>(Be64(times + 8 * i)) : static_cast<double>(static_cast<int32_t>(Be32(times + 4 * i)));
    if (idx[i] >= c[4]) return bad("type index out of range");
    out->from_s.push_back(t);
    out->offset_s.push_back(utoff(idx[i]));
  }
  footer->clear();
  if (tsize == 8) {
    size_t p = at + need;
    if (p < n && data[p] == '\n') {
      const size_t e = data.find('\n', p + 1);
      if (e != std::string::npos) *footer = data.substr(p + 1, e - p - 1);
    }
  }
  return true;
}

}  // namespace

int64_t DaysFromCivil(int64_t y, unsigned m, unsigned d) {
  y -= m <= 2 ? 1 : 0;
  const int64_t era = (y >= 0 ? y : y - 399) / 400;
  const unsigned yoe = static_cast<unsigned>(y - era * 400);
  const unsigned doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + static_cast<int64_t>(doe) - 719468;
}

bool PosixTzSchedule(const std::string& rule, double from_s, double to_s, water::UtcOffsetSchedule* out,
                     std::string* why) {
  Parser p(rule);
  std::string std_name, dst_name;
  double std_west = 0.0;
  auto bad = [&](const std::string& m) {
    *why = "time zone \"" + rule + "\": " + m +
           " (an IANA zone such as \"Europe/London\", or a POSIX rule such as \"GMT0BST,M3.5.0/1,M10.5.0\")";
    return false;
  };
  if (!p.Name(&std_name)) return bad("no zone abbreviation of 3 or more letters");
  if (!p.Time(&std_west)) return bad("no UTC offset after the abbreviation");
  water::UtcOffsetSchedule s;
  s.zone = rule;
  s.fixed_offset_s = -std_west;
  if (p.AtEnd()) {
    *out = s;
    return true;
  }
  if (!p.Name(&dst_name)) return bad("bad summer-time abbreviation");
  double dst_west = std_west - 3600.0;
  if (p.Peek() != ',' && !p.AtEnd() && !p.Time(&dst_west)) return bad("bad summer-time offset");
  Rule start, end;
  if (p.AtEnd()) {
    // No rule: the US rule of 2007 is the POSIX implementation default;
    // refuse rather than guess.
    return bad("a summer-time zone needs its rules (,start[/time],end[/time])");
  }
  if (!p.Eat(',') || !p.RuleSpec(&start) || !p.Eat(',') || !p.RuleSpec(&end) || !p.Done())
    return bad("bad rule");
  int64_t y0, y1;
  unsigned m, d;
  CivilFromDays(static_cast<int64_t>(std::floor(from_s / kDay_s)), &y0, &m, &d);
  CivilFromDays(static_cast<int64_t>(std::floor(to_s / kDay_s)), &y1, &m, &d);
  if (y1 - y0 > 400) return bad("span too long");
  for (int64_t y = y0 - 1; y <= y1 + 1; ++y) {
    // Start: local standard time; end: local summer time.
    const double t_start = static_cast<double>(RuleDay(start, y)) * kDay_s + start.time_s + std_west;
    const double t_end = static_cast<double>(RuleDay(end, y)) * kDay_s + end.time_s + dst_west;
    if (t_start < t_end) {
      s.from_s.push_back(t_start);
      s.offset_s.push_back(-dst_west);
      s.from_s.push_back(t_end);
      s.offset_s.push_back(-std_west);
    } else {  // southern hemisphere: summer time spans the new year
      s.from_s.push_back(t_end);
      s.offset_s.push_back(-std_west);
      s.from_s.push_back(t_start);
      s.offset_s.push_back(-dst_west);
    }
  }
  *out = s;
  return true;
}

bool BuildOffsetSchedule(const std::string& zone, double from_s, double to_s, water::UtcOffsetSchedule* out,
                         std::string* why) {
  // IANA names have a '/' (or are UTC/GMT) and no ',' (POSIX rules with
  // summer time have two, and may have '/' in their change times).
  const bool looks_iana =
      zone.find(',') == std::string::npos && (zone.find('/') != std::string::npos || zone == "UTC" || zone == "GMT");
  if (looks_iana) {
    if (zone.find("..") != std::string::npos || zone[0] == '/') {
      *why = "time zone \"" + zone + "\": not a zone name";
      return false;
    }
    const char* dir = std::getenv("TZDIR");
    const std::string path = std::string(dir && *dir ? dir : "/usr/share/zoneinfo") + "/" + zone;
    water::UtcOffsetSchedule s;
    std::string footer;
    if (!ReadTzif(path, &s, &footer, why)) {
      *why = "time zone \"" + zone + "\": " + *why + " (is the tzdata package installed?)";
      return false;
    }
    s.zone = zone;
    if (!footer.empty() && (s.from_s.empty() || to_s > s.from_s.back())) {
      water::UtcOffsetSchedule tail;
      const double after = s.from_s.empty() ? from_s : std::max(from_s, s.from_s.back());
      if (PosixTzSchedule(footer, after, to_s, &tail, why)) {
        if (s.from_s.empty()) s.fixed_offset_s = tail.fixed_offset_s;
        for (size_t i = 0; i < tail.from_s.size(); ++i) {
          if (!s.from_s.empty() && tail.from_s[i] <= s.from_s.back()) continue;
          s.from_s.push_back(tail.from_s[i]);
          s.offset_s.push_back(tail.offset_s[i]);
        }
        if (tail.from_s.empty() && !s.from_s.empty() && tail.fixed_offset_s != s.offset_s.back()) {
          s.from_s.push_back(s.from_s.back() + 1.0);
          s.offset_s.push_back(tail.fixed_offset_s);
        }
      }
    }
    // Keep the part that matters (one year either side).
    water::UtcOffsetSchedule k;
    k.zone = s.zone;
    k.fixed_offset_s = s.OffsetAt(from_s - 366.0 * kDay_s);
    for (size_t i = 0; i < s.from_s.size(); ++i) {
      if (s.from_s[i] > from_s - 366.0 * kDay_s && s.from_s[i] < to_s + 366.0 * kDay_s) {
        k.from_s.push_back(s.from_s[i]);
        k.offset_s.push_back(s.offset_s[i]);
      }
    }
    *out = k;
    return true;
  }
  return PosixTzSchedule(zone, from_s, to_s, out, why);
}

}  // namespace holdfast
