// Replay throughput through the full path a file-driven tool takes: the
// readings CSV parsed by ReadingsCsvReader, fed through the shared tick loop
// (RunReplay) into a Monitor with temperature transport and the decision
// stage on. The file is generated first in a temporary directory: the site
// of core_bench (one segment, 50 reaches, 8 points), every point at 1 Hz,
// ISO 8601 times with milliseconds, the points staggered within the second
// as loggers write them.
//
//   replay_bench --benchmark_filter=/hours:720/   # 30 days, about 21 million rows, ~0.9 GB
//
// Counters: rows_per_s (wall clock), projected_year_s (8 points at 1 Hz for
// 365 days = 252 288 000 rows, at that rate), the same two from the
// process's CPU time (cpu_rows_per_s, projected_year_cpu_s: what one idle
// core gives on a shared machine), peak_rss_mb (getrusage, whole process:
// the generator included), file_mb. Target: a year in under 3
// minutes on one core, i.e. at least 1.4 million rows/s. BM_ParseOnly reads
// the same file without a monitor, to split the time between the reader and
// the core; BM_ReplayOverParse runs both on the same file and prints the
// ratio of their CPU times (replay_over_parse). The file is written just before it is read, so it is read from
// the page cache: the figures are for the CPU, not the disk.
#include <benchmark/benchmark.h>
#include <sys/resource.h>
#include <time.h>
#include <unistd.h>

#include <algorithm>
#include <charconv>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <map>
#include <string>

#include "holdfast/monitor.h"
#include "readings_csv.h"
#include "replay_driver.h"
#include "test_site.h"

namespace holdfast {
namespace {

constexpr double kYearRows = 8.0 * 86400.0 * 365.0;  // 252 288 000
constexpr double kStart = 1767225600.0;              // 2026-01-01T00:00:00Z

// The site of core_bench: 8 points (3 meters, 3 pressures, 2 temperatures).
Site BenchSite() {
  using testing::AddPoint;
  const FluidSpec f = testing::GenericLiquid(860.0, 1.4e9, 8.5e-4);
  Site site = testing::TwoEndSite(f, {testing::Steel(14000.0, 0.4064, 0.0079), testing::Steel(11000.0, 0.3556, 0.0079)},
                                  500.0);
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
  seg.ground_temperature_k = 284.0;
  seg.thermal_time_constant_s = 36000.0;
  for (auto& p : site.points) {
    p.staleness_s = 30.0;
    if (p.kind == PointKind::kFlow) { p.random_sigma = 0.001; p.systematic_sigma = 0.0005; }
    if (p.kind == PointKind::kPressure) p.random_sigma = 2000.0;
    if (p.kind == PointKind::kTemperature) p.random_sigma = 0.05;
  }
  seg.nominal_flow_kg_s = 200.0;
  return site;
}

// Writes `hours` of readings; returns the number of rows, 0 on failure.
uint64_t Generate(const Site& site, const std::string& path, int hours) {
  std::FILE* f = std::fopen(path.c_str(), "wb");
  if (!f) return 0;
  std::string buf;
  buf.reserve(1 << 21);
  buf += "time,point,value,quality\n";
  const int np = static_cast<int>(site.points.size());
  uint64_t state = 0x9E3779B97F4A7C15ull, rows = 0;
  auto noise = [&state] {  // uniform in [-1, 1), xorshift64
    state ^= state << 13;
    state ^= state >> 7;
    state ^= state << 17;
    return static_cast<double>(state >> 11) * (2.0 / 9007199254740992.0) - 1.0;
  };
  const int64_t seconds = static_cast<int64_t>(hours) * 3600;
  for (int64_t s = 0; s < seconds; ++s) {
    const double t = kStart + static_cast<double>(s);
    const std::string stamp = FormatIsoUtc(t, 0);  // "2026-01-01T00:00:00Z"
    const double wave = std::sin(2.0 * M_PI * static_cast<double>(s) / 5400.0);
    for (int p = 0; p < np; ++p) {
      const PointSpec& ps = site.points[static_cast<size_t>(p)];
      double v = 0.0;
      int decimals = 3;
      switch (ps.kind) {
        case PointKind::kFlow:
          v = ps.id == "in" ? 199.0 + 0.5 * wave : (ps.id == "out" ? 150.0 + 0.5 * wave : 49.0);
          v *= 1.0 + 0.001 * noise();
          decimals = 4;
          break;
        case PointKind::kPressure:
          v = (ps.id == "p0" ? 40e5 : ps.id == "pm" ? 25e5 : 8e5) + 2e4 * wave + 1500.0 * noise();
          decimals = 1;
          break;
        case PointKind::kTemperature:
          v = (ps.id == "t0" ? 291.0 : 288.5) + 0.3 * wave + 0.05 * noise();
          decimals = 2;
          break;
        default: break;
      }
      // Milliseconds: the points reported in turn through the second.
      char ms[8];
      std::snprintf(ms, sizeof ms, ".%03dZ,", 37 + 110 * p);
      buf.append(stamp, 0, stamp.size() - 1);
      buf += ms;
      buf += ps.id;
      buf += ',';
      char num[32];
      const auto r = std::to_chars(num, num + sizeof num, v, std::chars_format::fixed, decimals);
      buf.append(num, r.ptr);
      buf += ",good\n";
      ++rows;
    }
    if (buf.size() > (1u << 20)) {
      std::fwrite(buf.data(), 1, buf.size(), f);
      buf.clear();
    }
  }
  std::fwrite(buf.data(), 1, buf.size(), f);
  return std::fclose(f) == 0 ? rows : 0;
}

// One generated file per length, shared by the benchmarks, removed at exit.
struct Files {
  std::filesystem::path dir;
  std::map<int, std::pair<std::string, uint64_t>> made;
  ~Files() {
    std::error_code ec;
    if (!dir.empty()) std::filesystem::remove_all(dir, ec);
  }
  const std::pair<std::string, uint64_t>* Get(const Site& site, int hours) {
    auto it = made.find(hours);
    if (it != made.end()) return &it->second;
    if (dir.empty()) {
      dir = std::filesystem::temp_directory_path() / ("holdfast-replay-bench-" + std::to_string(::getpid()));
      std::filesystem::create_directories(dir);
    }
    const std::string path = (dir / ("readings-" + std::to_string(hours) + "h.csv")).string();
    const uint64_t rows = Generate(site, path, hours);
    if (rows == 0) return nullptr;
    return &(made[hours] = {path, rows});
  }
};
Files g_files;

double PeakRssMb() {
  struct rusage u;
  getrusage(RUSAGE_SELF, &u);
  return static_cast<double>(u.ru_maxrss) / 1024.0;  // ru_maxrss is in KiB on Linux
}

double ProcessCpuS() {
  timespec ts;
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + 1e-9 * static_cast<double>(ts.tv_nsec);
}

void Report(benchmark::State& state, uint64_t rows, double wall_s, double cpu_s, const std::string& path) {
  const double rate = static_cast<double>(rows) / wall_s;
  const double cpu_rate = static_cast<double>(rows) / cpu_s;
  state.counters["rows"] = static_cast<double>(rows);
  state.counters["rows_per_s"] = rate;
  state.counters["projected_year_s"] = kYearRows / rate;
  state.counters["cpu_rows_per_s"] = cpu_rate;
  state.counters["projected_year_cpu_s"] = kYearRows / cpu_rate;
  state.counters["peak_rss_mb"] = PeakRssMb();
  state.counters["file_mb"] = static_cast<double>(std::filesystem::file_size(path)) / 1e6;
}

void BM_Replay(benchmark::State& state) {
  static const Site site = BenchSite();
  const auto* file = g_files.Get(site, static_cast<int>(state.range(0)));
  if (!file) {
    state.SkipWithError("cannot write the readings file");
    return;
  }
  for (auto _ : state) {
    const auto t0 = std::chrono::steady_clock::now();
    const double c0 = ProcessCpuS();
    Monitor monitor;
    std::string why;
    if (!monitor.Init(site, &why)) {
      state.SkipWithError(why.c_str());
      return;
    }
    ReadingsCsvReader reader;
    if (!reader.Open(file->first, site, &why)) {
      state.SkipWithError(why.c_str());
      return;
    }
    CsvReadingSource source(&reader);
    uint64_t events = 0;
    ReplayOptions options;
    options.on_event = [&events](const AlarmEvent&) { ++events; };
    const ReplayResult r = RunReplay(&monitor, &source, site.tick_s, options);
    const double wall = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    state.SetIterationTime(wall);
    if (reader.bad_rows() != 0 || r.readings_fed != file->second) {
      state.SkipWithError("rows lost or refused");
      return;
    }
    Report(state, reader.rows(), wall, ProcessCpuS() - c0, file->first);
    state.counters["ticks"] = static_cast<double>(r.ticks);
    state.counters["events"] = static_cast<double>(events);
  }
}
BENCHMARK(BM_Replay)->ArgName("hours")->Arg(1)->Arg(24)->Arg(720)->Iterations(1)->UseManualTime()->Unit(benchmark::kSecond);

void BM_ParseOnly(benchmark::State& state) {
  static const Site site = BenchSite();
  const auto* file = g_files.Get(site, static_cast<int>(state.range(0)));
  if (!file) {
    state.SkipWithError("cannot write the readings file");
    return;
  }
  for (auto _ : state) {
    const auto t0 = std::chrono::steady_clock::now();
    const double c0 = ProcessCpuS();
    ReadingsCsvReader reader;
    std::string why;
    if (!reader.Open(file->first, site, &why)) {
      state.SkipWithError(why.c_str());
      return;
    }
    Reading r;
    double sum = 0.0;
    while (reader.Next(&r)) sum += r.value;
    benchmark::DoNotOptimize(sum);
    const double wall = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    state.SetIterationTime(wall);
    Report(state, reader.rows(), wall, ProcessCpuS() - c0, file->first);
  }
}
BENCHMARK(BM_ParseOnly)->ArgName("hours")->Arg(1)->Arg(24)->Arg(720)->Iterations(1)->UseManualTime()->Unit(benchmark::kSecond);

// Both passes over the same file, one after the other, and the ratio of
// their CPU times (the replay's target: at most 2 times the parse). The
// monitor's Init (the threshold table) is timed apart: a fixed cost that a
// year's file does not see.
void BM_ReplayOverParse(benchmark::State& state) {
  static const Site site = BenchSite();
  const auto* file = g_files.Get(site, static_cast<int>(state.range(0)));
  if (!file) {
    state.SkipWithError("cannot write the readings file");
    return;
  }
  for (auto _ : state) {
    std::string why;
    double c0 = ProcessCpuS();
    {
      ReadingsCsvReader reader;
      if (!reader.Open(file->first, site, &why)) {
        state.SkipWithError(why.c_str());
        return;
      }
      Reading r;
      double sum = 0.0;
      while (reader.Next(&r)) sum += r.value;
      benchmark::DoNotOptimize(sum);
    }
    const double parse_s = ProcessCpuS() - c0;
    c0 = ProcessCpuS();
    Monitor monitor;
    if (!monitor.Init(site, &why)) {
      state.SkipWithError(why.c_str());
      return;
    }
    const double init_s = ProcessCpuS() - c0;
    c0 = ProcessCpuS();
    ReadingsCsvReader reader;
    if (!reader.Open(file->first, site, &why)) {
      state.SkipWithError(why.c_str());
      return;
    }
    CsvReadingSource source(&reader);
    const ReplayResult r = RunReplay(&monitor, &source, site.tick_s, ReplayOptions{});
    const double replay_s = ProcessCpuS() - c0;
    state.SetIterationTime(parse_s + init_s + replay_s);
    state.counters["rows"] = static_cast<double>(file->second);
    state.counters["ticks"] = static_cast<double>(r.ticks);
    state.counters["parse_cpu_s"] = parse_s;
    state.counters["init_cpu_s"] = init_s;
    state.counters["replay_cpu_s"] = replay_s;
    state.counters["replay_over_parse"] = replay_s / std::max(1e-9, parse_s);
    state.counters["monitor_ns_per_tick"] = 1e9 * (replay_s - parse_s) / std::max<double>(1.0, static_cast<double>(r.ticks));
  }
}
BENCHMARK(BM_ReplayOverParse)->ArgName("hours")->Arg(1)->Arg(24)->Arg(720)->Iterations(1)->UseManualTime()->Unit(benchmark::kSecond);

}  // namespace
}  // namespace holdfast

BENCHMARK_MAIN();
