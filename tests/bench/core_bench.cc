// Core throughput: ticks per second for one segment with 50 reaches, 8 points
// and 3 windows, and heap allocations per tick (must be zero).
// BM_DecisionPath times the stages after the balance on their own: the
// detector bank (SegmentDecision), the rupture detector and the segment's
// four alarms, one tick each, fed a steady noisy balance (target: 5 million
// ticks/s per segment on one core).
#include <benchmark/benchmark.h>

#include <cmath>
#include <cstdio>
#include <cstdlib>

#include "alloc_counter.h"
#include "holdfast/alarm.h"
#include "holdfast/decision.h"
#include "holdfast/monitor.h"
#include "holdfast/rupture.h"
#include "test_site.h"

namespace holdfast {
namespace {

Site BenchSite(bool transport, bool decision) {
  using testing::AddPoint;
  const FluidSpec f = testing::GenericLiquid(860.0, 1.4e9, 8.5e-4);
  Site site = testing::TwoEndSite(f, {testing::Steel(14000.0, 0.4064, 0.0079), testing::Steel(11000.0, 0.3556, 0.0079)},
                                  500.0);  // 28 + 22 = 50 reaches
  SegmentSpec& seg = site.segments[0];
  seg.profile = {{0, 80}, {9000, 140}, {25000, 10}};
  const int dl = AddPoint(&site, "dl", PointKind::kFlow, Quantity::kMassFlow, 0.001, 0.0005);
  const int pm = AddPoint(&site, "pm", PointKind::kPressure, Quantity::kPressure, 2000.0);
  MeterSpec md;
  md.point = dl;
  md.role = MeterRole::kDelivery;
  md.chainage_m = 14000;
  seg.meters.push_back(md);
  seg.pressure_gauges.insert(seg.pressure_gauges.begin() + 1, GaugeSpec{pm, 14000.0, 120.0});
  seg.temperature_filter_s = 300.0;
  if (transport) {
    seg.ground_temperature_k = 284.0;
    seg.thermal_time_constant_s = 36000.0;
  }
  for (auto& p : site.points) {
    if (p.kind == PointKind::kFlow) { p.random_sigma = 0.001; p.systematic_sigma = 0.0005; }
    if (p.kind == PointKind::kPressure) p.random_sigma = 2000.0;
    if (p.kind == PointKind::kTemperature) p.random_sigma = 0.05;
  }
  if (decision) seg.nominal_flow_kg_s = 200.0;  // arms the detector bank, alarms, location
  return site;  // 8 points: 3 meters, 3 pressures, 2 temperatures
}

void BM_MonitorTick(benchmark::State& state) {
  const bool transport = state.range(0) != 0;
  const bool decision = state.range(1) != 0;
  static Site site;
  site = BenchSite(transport, decision);
  Monitor m;
  std::string why;
  if (!m.Init(site, &why)) {
    state.SkipWithError(why.c_str());
    return;
  }
  const int np = static_cast<int>(site.points.size());
  double t = 1.7e9;
  uint64_t k = 0;
  auto feed_tick = [&] {
    t += 1.0;
    ++k;
    const double wobble = 0.001 * static_cast<double>(k % 17);
    for (int p = 0; p < np; ++p) {
      double v = 0.0;
      switch (site.points[p].kind) {
        case PointKind::kFlow: v = p == 0 ? 200.0 + wobble : (p == 1 ? 150.0 : 49.0); break;
        case PointKind::kPressure: v = 40e5 - 1e5 * p + 100.0 * wobble; break;
        case PointKind::kTemperature: v = 290.0 - 0.5 * p + wobble; break;
        default: break;
      }
      m.Feed({p, t, v, Quality::kGood});
    }
    m.Advance(t);
  };
  // Warm up: windows and filters settle, the decision stage leaves learning.
  for (int i = 0; i < (decision ? 8000 : 1000); ++i) feed_tick();
  const uint64_t before = bench::AllocationCount();
  for (auto _ : state) {
    feed_tick();
    benchmark::DoNotOptimize(m.segment(0).residual_kg_s);
  }
  const uint64_t allocs = bench::AllocationCount() - before;
  state.counters["allocs_per_tick"] =
      benchmark::Counter(static_cast<double>(allocs) / static_cast<double>(state.iterations()));
  state.counters["ticks_per_s"] = benchmark::Counter(static_cast<double>(state.iterations()),
                                                     benchmark::Counter::kIsRate);
  state.counters["reaches"] = m.inventory(0).reach_count();
  if (allocs != 0) state.SkipWithError("the tick allocated on the heap");
}
BENCHMARK(BM_MonitorTick)
    ->Args({0, 0})
    ->Args({1, 0})
    ->Args({0, 1})
    ->Args({1, 1})
    ->ArgNames({"transport", "decision"});

// The decision path: what a tick costs after the balance is known.
void BM_DecisionPath(benchmark::State& state) {
  static const Site site = BenchSite(false, true);
  const SegmentSpec& seg = site.segments[0];
  std::string why;
  static CusumThresholdTable table;
  static const bool built = table.Build(DecisionOptions{}.false_alarm_interval_s / DecisionOptions{}.block_s, &why);
  SegmentDecision decision;
  RuptureDetector rupture;
  if (!built || !decision.Init(DecisionOptions{}, seg.nominal_flow_kg_s, &table, &why) ||
      !rupture.Init(RuptureOptions{}, seg, site.tick_s, 860.0, 1.4e9, 2000.0, &why)) {
    state.SkipWithError(why.c_str());
    return;
  }
  SequenceCounter counter;
  AlarmEventRing<64> sink;
  Alarm alarms[kAlarmTypeCount];
  for (int k = 0; k < kAlarmTypeCount; ++k) {
    if (!alarms[k].Init(0, static_cast<AlarmType>(k), AlarmOptions{}, &counter, &sink, &why)) {
      state.SkipWithError(why.c_str());
      return;
    }
  }
  double t = 1.7e9;
  uint64_t k = 0;
  auto tick = [&] {
    t += 1.0;
    ++k;
    const double noise = 0.01 * static_cast<double>(static_cast<int>(k * 2654435761u % 201) - 100);
    decision.Step(t, 1.0, true, noise, 0.1 * noise);
    RuptureInput in;
    in.inflow_kg_s = 200.0 + noise;
    in.outflow_kg_s = 150.0;
    in.lateral_out_kg_s = 49.0;
    in.p_inlet_pa = 40e5 + 100.0 * noise;
    in.p_outlet_pa = 8e5;
    in.residual_kg_s = noise;
    const RuptureStatus& rs = rupture.Step(t, in);
    const DecisionResult& d = decision.result();
    AlarmEvidence ev;
    ev.leak_rate_kg_s = d.leak_rate_kg_s;
    alarms[0].Update(t, d.state == DecisionState::kLeak, ev);
    alarms[1].Update(t, rs.rupture, ev);
    alarms[2].Update(t, false, ev);
    alarms[3].Update(t, false, ev);
  };
  for (int i = 0; i < 8000; ++i) tick();  // past the warm-up and the rupture's look-back
  const uint64_t before = bench::AllocationCount();
  for (auto _ : state) {
    tick();
    benchmark::DoNotOptimize(decision.result().leak_rate_kg_s);
  }
  const uint64_t allocs = bench::AllocationCount() - before;
  state.counters["allocs_per_tick"] =
      benchmark::Counter(static_cast<double>(allocs) / static_cast<double>(state.iterations()));
  state.counters["ticks_per_s"] = benchmark::Counter(static_cast<double>(state.iterations()),
                                                     benchmark::Counter::kIsRate);
  if (allocs != 0) state.SkipWithError("the decision path allocated on the heap");
}
BENCHMARK(BM_DecisionPath);

}  // namespace
}  // namespace holdfast

BENCHMARK_MAIN();
