// Simulator throughput: node updates per second of the method of
// characteristics (holdfast_sim), on a 48 km two-section crude line with a
// pump, a delivery, a leak and a receiving tank, at three grid sizes. The
// figure includes everything a step does (interior nodes, junctions,
// boundaries, the property refresh about once a second with its parcel
// transport), and heap allocations per step (must be zero).
#include <benchmark/benchmark.h>

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <map>
#include <memory>
#include <string>

#include "alloc_counter.h"
#include "moc.h"

namespace holdfast::sim {
namespace {

MocSetup BenchLine(double dt_hint_s) {
  MocSetup s;
  PipeSection a;
  a.length_m = 22000.0;
  a.outside_diameter_m = 0.4064;
  a.wall_thickness_m = 0.00792;
  PipeSection b = a;
  b.length_m = 26000.0;
  b.outside_diameter_m = 0.3556;
  s.sections = {a, b};
  s.profile = {{0.0, 85.0}, {12000.0, 140.0}, {30000.0, 60.0}, {48000.0, 8.0}};
  s.fluid.kind = FluidKind::kCrudeOil;
  s.fluid.base_density_kg_m3 = 862.0;
  s.fluid.viscosity_pa_s = 1.0e-2;
  s.time_step_hint_s = dt_hint_s;
  s.wave_speed_tolerance = 0.01;
  s.upstream.type = UpstreamType::kPump;
  s.upstream.head_m.Set(95.0);
  s.upstream.shutoff_head_m = 760.0;
  s.upstream.curve_c_s2_m5 = (760.0 - 600.0) / std::pow(0.25, 2);
  s.downstream.type = DownstreamType::kTank;
  s.downstream.strapping = {{0.0, 0.0}, {18.0, 20510.0}};
  s.downstream.tank_base_elevation_m = 8.0;
  s.downstream.tank_initial_level_m = 5.2;
  s.downstream.valve_cda_m2 = 0.05;
  LateralSetup d;
  d.chainage_m = 22000.0;
  d.flow.Set(150.0 / 3.6);
  d.flow.AddRamp(600.0, 120.0, 220.0 / 3.6);  // a setpoint change keeps the line moving
  s.laterals.push_back(d);
  LeakSetup leak;
  leak.chainage_m = 31000.0;
  leak.onset_s = 300.0;
  leak.ramp_s = 60.0;
  leak.rate_kg_s = 3.2;
  s.leaks.push_back(leak);
  s.inlet_temperature.times_s = {0.0};
  s.inlet_temperature.values_k = {291.15};
  s.inlet_temperature.swing_amplitude_k = 0.5;
  s.inlet_temperature.swing_period_s = 43200.0;
  s.ground_temperature_k = 284.15;
  s.thermal_time_constant_s = 36000.0;
  return s;
}

// One model per grid, built once: the benchmark calls this function several
// times while it settles on an iteration count.
MocModel* Model(int64_t arg, std::string* why) {
  static std::map<int64_t, std::unique_ptr<MocModel>> models;
  auto& slot = models[arg];
  if (!slot) {
    auto m = std::make_unique<MocModel>();
    if (!m->Init(BenchLine(static_cast<double>(arg) * 1e-4), why)) return nullptr;  // arg in units of 0.1 ms
    for (int i = 0; i < 100; ++i) m->Step();
    slot = std::move(m);
  }
  return slot.get();
}

void BM_MocStep(benchmark::State& state) {
  std::string why;
  MocModel* model = Model(state.range(0), &why);
  if (model == nullptr) {
    state.SkipWithError(why.c_str());
    return;
  }
  MocModel& moc = *model;
  const uint64_t before = bench::AllocationCount();
  uint64_t steps = 0;
  for (auto _ : state) {
    moc.Step();
    ++steps;
    benchmark::DoNotOptimize(moc.node_pressure()[0]);
  }
  const uint64_t allocations = bench::AllocationCount() - before;
  const double nodes = static_cast<double>(moc.node_count());
  state.SetItemsProcessed(static_cast<int64_t>(steps) * moc.node_count());
  state.counters["nodes"] = nodes;
  state.counters["dt_ms"] = 1e3 * moc.dt_s();
  state.counters["allocs_per_step"] = steps > 0 ? static_cast<double>(allocations) / static_cast<double>(steps) : 0.0;
  state.counters["sim_s_per_wall_s"] =
      benchmark::Counter(static_cast<double>(steps) * moc.dt_s(), benchmark::Counter::kIsRate);
  if (allocations != 0) {
    std::fprintf(stderr, "moc_bench: %llu heap allocations in the step loop (must be 0)\n",
                 static_cast<unsigned long long>(allocations));
    std::exit(1);
  }
}
// Time-step hints 0.1 s (the demo grid, about 430 nodes), 0.01 s and 0.002 s.
BENCHMARK(BM_MocStep)->Arg(1000)->Arg(100)->Arg(20);

}  // namespace
}  // namespace holdfast::sim

BENCHMARK_MAIN();
