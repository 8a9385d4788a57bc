// libFuzzer target: the readings payload parser on arbitrary bytes. The
// first byte picks the topic form (batch, a known point, an unknown point)
// and the limits; the rest is the payload. (The command parser is covered
// by payload_test.cc and the malformed-payload integration test.) Built with clang (-fsanitize=fuzzer,address,undefined) and
// run for a bounded time by ctest (tests/daemon/CMakeLists.txt).
#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "payload.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  using namespace holdfast::daemon;
  static const PointIndex points = {{"CF-FT-101", 0}, {"CF-PT-101", 1}, {"MB-LT-301", 2}};
  if (size == 0) return 0;
  const uint8_t selector = data[0];
  const std::string_view payload(reinterpret_cast<const char*>(data + 1), size - 1);
  PayloadLimits limits;
  limits.max_payload_bytes = 4096;
  limits.max_batch = 64;
  limits.now_s = 1773468000.0;
  std::vector<holdfast::Reading> out;
  if (selector & 4) limits.max_depth = 2;
  switch (selector % 3) {
    case 0: ParseReadings(payload, "", points, limits, &out); break;
    case 1: ParseReadings(payload, "CF-FT-101", points, limits, &out); break;
    default: ParseReadings(payload, "NO-SUCH", points, limits, &out); break;
  }
  for (const holdfast::Reading& r : out)
    if (!(r.value == r.value) || !(r.time_s == r.time_s)) __builtin_trap();  // never a NaN through
  return 0;
}
