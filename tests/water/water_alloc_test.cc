// The water core's hot path allocates nothing: after Init, ticks of the
// district monitor and the night-flow analyzer (through the district driver,
// including the aligner and the alarm) make no heap allocation, across the
// profile forming, the detectors starting and a burst alarm. Counted by
// replacing the global operator new in this test binary.
#include <atomic>
#include <cstdlib>
#include <new>
#include <string>
#include <vector>

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include "district_driver.h"
#include "district_sim.h"
#include "site_file.h"

namespace {
std::atomic<uint64_t> g_allocations{0};
}

// Every replaceable form that allocates with malloc is replaced, so that each
// delete frees what its new allocated (also under AddressSanitizer).
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmismatched-new-delete"
void* operator new(std::size_t n) {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) { return operator new(n); }
void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  return std::malloc(n ? n : 1);
}
void* operator new[](std::size_t n, const std::nothrow_t& t) noexcept { return operator new(n, t); }
void operator delete(void* p) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }
void operator delete(void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept { std::free(p); }
#pragma GCC diagnostic pop

namespace holdfast {
namespace {

TEST(WaterHotPath, NoAllocationPerTick) {
  Site site;
  std::vector<ConfigProblem> problems;
  ASSERT_TRUE(LoadSiteFile(std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/delvenmoor-site.json", &site, &problems));
  nlohmann::json j = {{"format", "holdfast-district-scenario/1"}, {"district", "QF-DMA-01"},
                      {"start", "2026-04-05T23:00:00Z"},           {"duration_days", 12},
                      {"seed", 3},
                      {"bursts", {{{"start_day", 10.4}, {"rate_m3_h_at_50m", 4.0}}}}};
  sim::DistrictScenario sc;
  ASSERT_TRUE(sim::CompileDistrictScenario(j, "t", site, &sc, &problems));
  sim::DistrictSimResult r;
  std::string why;
  ASSERT_TRUE(sim::SimulateDistrict(site, sc, &r, &why)) << why;
  DistrictRunner runner;
  ASSERT_TRUE(runner.Init(site, 0, 60.0, &why)) << why;

  int nights = 0, raised = 0;
  double next = 0.0;
  bool started = false;
  const uint64_t before = g_allocations.load();
  for (const sim::SimReading& s : r.readings) {
    if (!started) {
      next = s.time_s;
      started = true;
    }
    while (s.time_s > next) {
      nights += runner.Advance(next) ? 1 : 0;
      AlarmEvent e;
      while (runner.PopEvent(&e)) raised += e.cause == AlarmCause::kConditionRaised ? 1 : 0;
      next += 60.0;
    }
    runner.Feed(Reading{s.point, s.time_s, s.value, s.quality});
  }
  const uint64_t during = g_allocations.load() - before;
  EXPECT_EQ(during, 0u) << "heap allocations during " << r.readings.size() << " readings";
  EXPECT_GE(nights, 10);
  EXPECT_EQ(raised, 1);  // the burst, so the alarm path ran too
}

}  // namespace
}  // namespace holdfast
