// A timestamped reading as it enters the core.
#pragma once

#include <cstdint>

namespace holdfast {

enum class Quality : uint8_t { kGood = 0, kUncertain = 1, kBad = 2 };
const char* QualityName(Quality q);

// `value` is in the unit the point declares in the site config; the core
// converts it to SI once, on entry. `point` is the index from Site::FindPoint.
struct Reading {
  int32_t point = -1;
  double time_s = 0.0;  // seconds since 1970-01-01T00:00:00Z (data time)
  double value = 0.0;
  Quality quality = Quality::kGood;
};

}  // namespace holdfast
