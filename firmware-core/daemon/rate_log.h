// Rate-limited log lines: at most one line per key per interval; the lines
// held back are counted and reported with the next line that goes out.
#pragma once

#include <cstdint>
#include <cstdio>
#include <string>
#include <unordered_map>

namespace holdfast::daemon {

class RateLimitedLog {
 public:
  explicit RateLimitedLog(double interval_s = 10.0) : interval_s_(interval_s) {}
  // True when a line for `key` may go out at wall time now_s; *suppressed
  // is then the number held back since the previous line.
  bool Allow(const std::string& key, double now_s, uint64_t* suppressed) {
    Slot& s = slots_[key];
    if (s.seen && now_s - s.last_s < interval_s_) {
      ++s.suppressed;
      return false;
    }
    *suppressed = s.suppressed;
    s.suppressed = 0;
    s.last_s = now_s;
    s.seen = true;
    return true;
  }

 private:
  struct Slot {
    double last_s = 0.0;
    uint64_t suppressed = 0;
    bool seen = false;
  };
  double interval_s_;
  std::unordered_map<std::string, Slot> slots_;
};

}  // namespace holdfast::daemon
