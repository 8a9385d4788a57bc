// Tuning files (tuning_file.h): write and read back, the problems a loader
// must name (version, unknown segment, truncation, bad values, unknown keys),
// the atomic write, and seeding a monitor from a file.
#include "tuning_file.h"

#include <unistd.h>

#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <limits>
#include <random>
#include <sstream>
#include <string>

#include <gtest/gtest.h>

#include "holdfast/arl.h"
#include "holdfast/decision.h"
#include "holdfast/monitor.h"
#include "test_site.h"

namespace holdfast {
namespace {

namespace fs = std::filesystem;
using testing::GenericLiquid;
using testing::Steel;
using testing::TwoEndSite;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// A fresh directory per test, removed afterwards.
class TuningFileTest : public ::testing::Test {
 protected:
  void SetUp() override {
    const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = fs::temp_directory_path() /
           ("holdfast-tuning-" + std::to_string(::getpid()) + "-" + info->name());
    fs::remove_all(dir_);
    fs::create_directories(dir_);
    site_ = TwoEndSite(GenericLiquid(860.0, 1.4e9, 8.5e-4), {Steel(20000.0, 0.4064, 0.0079)}, 1000.0);
    site_.segments[0].nominal_flow_kg_s = 200.0;
  }
  void TearDown() override { fs::remove_all(dir_); }

  std::string Path(const std::string& name) const { return (dir_ / name).string(); }

  static std::string Read(const std::string& path) {
    std::ifstream in(path, std::ios::binary);
    std::stringstream ss;
    ss << in.rdbuf();
    return ss.str();
  }
  static void Write(const std::string& path, const std::string& text) {
    std::ofstream out(path, std::ios::binary | std::ios::trunc);
    out << text;
  }
  // Replaces the first `from` in the file by `to`.
  static void Edit(const std::string& path, const std::string& from, const std::string& to) {
    std::string text = Read(path);
    const size_t at = text.find(from);
    ASSERT_NE(at, std::string::npos) << from;
    text.replace(at, from.size(), to);
    Write(path, text);
  }

  // Every field set, including a detection time no leak meets (NaN).
  static TuningFile Sample() {
    TuningFile f;
    f.site = "test";
    f.data = "leak-free.csv";
    f.until_s = 1773475200.0;  // 2026-03-14T08:00:00Z
    f.false_alarm_interval_s = 90.0 * 86400.0;
    f.detectors_in_bank = 5;
    f.inventory_filter_s = 450.0;
    SegmentTuning s;
    s.segment = "S1";
    s.block_s = 60.0;
    s.bias_kg_s = -0.4795986;
    s.bias_mean_kg_s = -0.09890661;
    s.sigma_kg_s = 12.94774;
    s.sigma_sd_kg_s = 12.9733;
    s.phi = -0.6314967;
    s.inventory_rate_kg_s = 174.2015;
    s.inventory_rate_sigma_kg_s = 12.27619;
    s.blocks = 119;
    s.blocks_dropped = 2;
    s.block_pairs = 117;
    s.first_time_s = 1773468006.0;
    s.last_time_s = 1773475146.0;
    s.nominal_flow_kg_s = 215.5989;
    s.sigma_eff_kg_s = 6.153491;
    s.arl0_blocks = 648000.0;
    s.detectors.push_back({1.077995, 0.005, 0.08759211, 51.38397, 648000.0});
    s.detectors.push_back({43.11978, 0.2, 3.503684, 1.161546, 647999.5});
    s.bank_false_alarm_interval_s = 7776000.0;
    s.detection.push_back({30.0, kNaN, kNaN, kNaN, kNaN});
    s.detection.push_back({3600.0, 3.670282, 0.01702366, 0.5964553, 3596.026});
    f.segments.push_back(s);
    return f;
  }

  fs::path dir_;
  Site site_;
};

// Equal, or both NaN.
void ExpectSame(double want, double got, const char* what) {
  if (std::isnan(want)) {
    EXPECT_TRUE(std::isnan(got)) << what << ": " << got;
  } else {
    EXPECT_NEAR(got, want, 1e-6 * std::fabs(want)) << what;
  }
}

TEST_F(TuningFileTest, RoundTrip) {
  const TuningFile want = Sample();
  std::string why;
  ASSERT_TRUE(WriteTuningFile(Path("tuning.json"), want, &why)) << why;
  TuningFile got;
  ASSERT_TRUE(LoadTuningFile(Path("tuning.json"), site_, &got, &why)) << why;

  EXPECT_EQ(got.site, want.site);
  EXPECT_EQ(got.data, want.data);
  ExpectSame(want.until_s, got.until_s, "until");
  ExpectSame(want.false_alarm_interval_s, got.false_alarm_interval_s, "budget");
  EXPECT_EQ(got.detectors_in_bank, want.detectors_in_bank);
  ExpectSame(want.inventory_filter_s, got.inventory_filter_s, "inventory filter");
  ASSERT_EQ(got.segments.size(), 1u);
  const SegmentTuning& a = want.segments[0];
  const SegmentTuning& b = got.segments[0];
  EXPECT_EQ(b.segment, "S1");
  ExpectSame(a.block_s, b.block_s, "block_s");
  ExpectSame(a.bias_kg_s, b.bias_kg_s, "bias");
  ExpectSame(a.bias_mean_kg_s, b.bias_mean_kg_s, "bias mean");
  ExpectSame(a.sigma_kg_s, b.sigma_kg_s, "sigma");
  ExpectSame(a.sigma_sd_kg_s, b.sigma_sd_kg_s, "sd");
  ExpectSame(a.phi, b.phi, "phi");
  ExpectSame(a.inventory_rate_kg_s, b.inventory_rate_kg_s, "inventory rate");
  ExpectSame(a.inventory_rate_sigma_kg_s, b.inventory_rate_sigma_kg_s, "inventory rate spread");
  EXPECT_EQ(b.blocks, a.blocks);
  EXPECT_EQ(b.blocks_dropped, a.blocks_dropped);
  EXPECT_EQ(b.block_pairs, a.block_pairs);
  ExpectSame(a.first_time_s, b.first_time_s, "first time");
  ExpectSame(a.last_time_s, b.last_time_s, "last time");
  ExpectSame(a.nominal_flow_kg_s, b.nominal_flow_kg_s, "nominal");
  ExpectSame(a.sigma_eff_kg_s, b.sigma_eff_kg_s, "sigma eff");
  ExpectSame(a.arl0_blocks, b.arl0_blocks, "arl0");
  ExpectSame(a.bank_false_alarm_interval_s, b.bank_false_alarm_interval_s, "bank interval");
  ASSERT_EQ(b.detectors.size(), a.detectors.size());
  for (size_t i = 0; i < a.detectors.size(); ++i) {
    ExpectSame(a.detectors[i].target_kg_s, b.detectors[i].target_kg_s, "target");
    ExpectSame(a.detectors[i].target_fraction, b.detectors[i].target_fraction, "fraction");
    ExpectSame(a.detectors[i].k, b.detectors[i].k, "k");
    ExpectSame(a.detectors[i].h, b.detectors[i].h, "h");
    ExpectSame(a.detectors[i].arl0_blocks, b.detectors[i].arl0_blocks, "detector arl0");
  }
  ASSERT_EQ(b.detection.size(), a.detection.size());
  for (size_t i = 0; i < a.detection.size(); ++i) {
    ExpectSame(a.detection[i].detection_s, b.detection[i].detection_s, "detection time");
    ExpectSame(a.detection[i].leak_kg_s, b.detection[i].leak_kg_s, "leak");
    ExpectSame(a.detection[i].leak_fraction, b.detection[i].leak_fraction, "leak fraction");
    ExpectSame(a.detection[i].shift_sigma, b.detection[i].shift_sigma, "shift");
    ExpectSame(a.detection[i].delay_s, b.detection[i].delay_s, "delay");
  }
  // Written again from what was read: the same bytes (7 digits are a fixed point).
  ASSERT_TRUE(WriteTuningFile(Path("again.json"), got, &why)) << why;
  EXPECT_EQ(Read(Path("again.json")), Read(Path("tuning.json")));
  EXPECT_NE(Read(Path("tuning.json")).find("\"format\": \"holdfast-tuning/1\""), std::string::npos);
}

TEST_F(TuningFileTest, WrongVersionIsAnError) {
  std::string why;
  ASSERT_TRUE(WriteTuningFile(Path("tuning.json"), Sample(), &why)) << why;
  Edit(Path("tuning.json"), "holdfast-tuning/1", "holdfast-tuning/2");
  TuningFile got;
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  EXPECT_NE(why.find(Path("tuning.json") + ":/format: expected \"holdfast-tuning/1\" (got \"holdfast-tuning/2\")"),
            std::string::npos)
      << why;
}

TEST_F(TuningFileTest, MissingFormatIsAnError) {
  Write(Path("tuning.json"), "{\"segments\": {}}\n");
  TuningFile got;
  std::string why;
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  EXPECT_NE(why.find(Path("tuning.json") + ":/format: missing"), std::string::npos) << why;
}

TEST_F(TuningFileTest, UnknownSegmentIsAnError) {
  std::string why;
  ASSERT_TRUE(WriteTuningFile(Path("tuning.json"), Sample(), &why)) << why;
  Edit(Path("tuning.json"), "\"S1\":", "\"S9\":");
  TuningFile got;
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  EXPECT_NE(why.find(Path("tuning.json") + ":/segments/S9: no segment \"S9\" in the site (it has: S1)"),
            std::string::npos)
      << why;
}

TEST_F(TuningFileTest, TruncatedFileIsAParseErrorWithItsPlace) {
  std::string why;
  ASSERT_TRUE(WriteTuningFile(Path("tuning.json"), Sample(), &why)) << why;
  const std::string text = Read(Path("tuning.json"));
  Write(Path("tuning.json"), text.substr(0, text.size() / 2));
  TuningFile got;
  got.site = "untouched";
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  EXPECT_EQ(why.rfind(Path("tuning.json") + ":", 0), 0u) << why;  // file:line:column
  EXPECT_NE(why.find("parse error"), std::string::npos) << why;
  EXPECT_NE(why.find("truncated"), std::string::npos) << why;
  EXPECT_EQ(got.site, "untouched");  // nothing half-filled

  Write(Path("empty.json"), "");
  EXPECT_FALSE(LoadTuningFile(Path("empty.json"), site_, &got, &why));
  EXPECT_NE(why.find("parse error"), std::string::npos) << why;
}

TEST_F(TuningFileTest, MissingFileIsAnError) {
  TuningFile got;
  std::string why;
  EXPECT_FALSE(LoadTuningFile(Path("absent.json"), site_, &got, &why));
  EXPECT_NE(why.find(Path("absent.json") + ": cannot read the file"), std::string::npos) << why;
}

// Every problem is named with its JSON pointer, all of them at once.
TEST_F(TuningFileTest, BadValuesAndUnknownKeysNameTheirPath) {
  std::string why;
  ASSERT_TRUE(WriteTuningFile(Path("tuning.json"), Sample(), &why)) << why;
  Edit(Path("tuning.json"), "\"sigma_kg_s\": 12.94774", "\"sigma_kg_s\": 0");
  Edit(Path("tuning.json"), "\"phi\": -0.6314967", "\"phi\": 1.5");
  Edit(Path("tuning.json"), "\"block_pairs\"", "\"block_pears\"");
  Edit(Path("tuning.json"), "\"bias_kg_s\": -0.4795986", "\"bias_kg_s\": \"small\"");
  TuningFile got;
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  const std::string f = Path("tuning.json");
  for (const std::string& want :
       {f + ":/segments/S1/sigma_kg_s: must be positive (got 0)",
        f + ":/segments/S1/phi: must lie strictly between -1 and 1 (got 1.5)",
        f + ":/segments/S1/block_pears: unknown key", f + ":/segments/S1/bias_kg_s: must be a number"})
    EXPECT_NE(why.find(want), std::string::npos) << "missing: " << want << "\nin:\n" << why;
}

TEST_F(TuningFileTest, MissingRequiredFieldIsNamed) {
  Write(Path("tuning.json"),
        "{\"format\": \"holdfast-tuning/1\", \"segments\": {\"S1\": {\"block_s\": 60, \"bias_kg_s\": 0, "
        "\"phi\": 0}}}\n");
  TuningFile got;
  std::string why;
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  EXPECT_NE(why.find(Path("tuning.json") + ":/segments/S1/sigma_kg_s: missing required field"), std::string::npos)
      << why;
}

TEST_F(TuningFileTest, DuplicateSegmentIsAnError) {
  Write(Path("tuning.json"),
        "{\"format\": \"holdfast-tuning/1\", \"segments\": {"
        "\"S1\": {\"block_s\": 60, \"bias_kg_s\": 0, \"sigma_kg_s\": 1, \"phi\": 0},"
        "\"S1\": {\"block_s\": 60, \"bias_kg_s\": 5, \"sigma_kg_s\": 1, \"phi\": 0}}}\n");
  TuningFile got;
  std::string why;
  EXPECT_FALSE(LoadTuningFile(Path("tuning.json"), site_, &got, &why));
  EXPECT_NE(why.find(Path("tuning.json") + ":/segments/S1: duplicate key"), std::string::npos) << why;
}

// A minimal hand-written file: only the seeded fields are required.
TEST_F(TuningFileTest, MinimalFileLoads) {
  Write(Path("tuning.json"),
        "{\"format\": \"holdfast-tuning/1\", \"segments\": {\"S1\": {\"block_s\": 60, \"bias_kg_s\": 0.25, "
        "\"sigma_kg_s\": 1.5, \"phi\": 0.2}}}\n");
  TuningFile got;
  std::string why;
  ASSERT_TRUE(LoadTuningFile(Path("tuning.json"), site_, &got, &why)) << why;
  ASSERT_NE(got.Find("S1"), nullptr);
  EXPECT_DOUBLE_EQ(got.Find("S1")->sigma_kg_s, 1.5);
  EXPECT_EQ(got.Find("S2"), nullptr);
}

TEST_F(TuningFileTest, AtomicWriteLeavesNoTmpBehind) {
  const std::string path = Path("tuning.json");
  std::string why;
  ASSERT_TRUE(WriteTuningFile(path, Sample(), &why)) << why;
  EXPECT_TRUE(fs::exists(path));
  EXPECT_FALSE(fs::exists(path + ".tmp"));
  // Overwriting replaces the file whole.
  TuningFile other = Sample();
  other.site = "replaced";
  ASSERT_TRUE(WriteTuningFile(path, other, &why)) << why;
  EXPECT_FALSE(fs::exists(path + ".tmp"));
  TuningFile got;
  ASSERT_TRUE(LoadTuningFile(path, site_, &got, &why)) << why;
  EXPECT_EQ(got.site, "replaced");
  // A stale .tmp from a crash is overwritten, not left behind.
  Write(path + ".tmp", "half a file");
  ASSERT_TRUE(WriteTuningFile(path, Sample(), &why)) << why;
  EXPECT_FALSE(fs::exists(path + ".tmp"));
  // No directory: fails, names the file, leaves nothing.
  const std::string nowhere = Path("no-such-dir/tuning.json");
  EXPECT_FALSE(WriteTuningFile(nowhere, Sample(), &why));
  EXPECT_NE(why.find(nowhere), std::string::npos) << why;
  EXPECT_FALSE(fs::exists(nowhere + ".tmp"));
  // Only the tuning file itself is left.
  int entries = 0;
  for (const auto& e : fs::directory_iterator(dir_)) {
    (void)e;
    ++entries;
  }
  EXPECT_EQ(entries, 1);
}

// Feeds steady readings (no imbalance) for `ticks` seconds.
void RunSteady(Monitor* m, const Site& site, int ticks) {
  const int in = site.FindPoint("in"), out = site.FindPoint("out"), p0 = site.FindPoint("p0"),
            pl = site.FindPoint("pL"), t0 = site.FindPoint("t0"), tl = site.FindPoint("tL");
  for (int k = 0; k < ticks; ++k) {
    const double t = k;
    m->Feed({in, t, 200.0, Quality::kGood});
    m->Feed({out, t, 200.0, Quality::kGood});
    m->Feed({p0, t, 50e5, Quality::kGood});
    m->Feed({pl, t, 10e5, Quality::kGood});
    m->Feed({t0, t, 291.0, Quality::kGood});
    m->Feed({tl, t, 291.0, Quality::kGood});
    m->Advance(t);
  }
}

TEST_F(TuningFileTest, ApplyTuningSeedsTheDecisionStage) {
  TuningFile f;
  SegmentTuning s;
  s.segment = "S1";
  s.bias_kg_s = 0.5;
  s.sigma_kg_s = 0.2;
  s.phi = 0.3;
  f.segments.push_back(s);

  Monitor seeded, unseeded;
  std::string why;
  ASSERT_TRUE(seeded.Init(site_, &why)) << why;
  ASSERT_TRUE(unseeded.Init(site_, &why)) << why;
  ASSERT_TRUE(ApplyTuning(f, &seeded, &why)) << why;
  // Two 60 s blocks of zero imbalance: the seeded statistics move by the
  // learning weight 1/1001 per block only (SegmentDecision::Learn).
  RunSteady(&seeded, site_, 125);
  RunSteady(&unseeded, site_, 125);
  const DecisionResult& d = seeded.segment(0).decision;
  EXPECT_NEAR(d.bias_kg_s, 0.5, 0.005);
  EXPECT_NEAR(d.sigma_kg_s, 0.2, 0.01);
  EXPECT_NEAR(d.phi, 0.3, 0.01);
  EXPECT_NEAR(unseeded.segment(0).decision.bias_kg_s, 0.0, 1e-3);
}

TEST_F(TuningFileTest, ApplyTuningRefusesWhatTheMonitorCannotTake) {
  Monitor m;
  std::string why;
  TuningFile f;
  SegmentTuning s;
  s.segment = "S1";
  s.sigma_kg_s = 1.0;
  f.segments.push_back(s);
  EXPECT_FALSE(ApplyTuning(f, &m, &why));  // not initialised
  ASSERT_TRUE(m.Init(site_, &why)) << why;
  f.segments[0].sigma_kg_s = 0.0;
  EXPECT_FALSE(ApplyTuning(f, &m, &why));
  EXPECT_NE(why.find("S1"), std::string::npos) << why;
  f.segments[0].sigma_kg_s = 1.0;
  f.segments[0].segment = "S9";
  EXPECT_FALSE(ApplyTuning(f, &m, &why));
  EXPECT_NE(why.find("no segment \"S9\""), std::string::npos) << why;

  // Without a nominal flow the segment has no decision stage: skipped.
  Site plain = site_;
  plain.segments[0].nominal_flow_kg_s = kNaN;
  Monitor p;
  ASSERT_TRUE(p.Init(plain, &why)) << why;
  f.segments[0].segment = "S1";
  EXPECT_TRUE(ApplyTuning(f, &p, &why)) << why;
}


// `holdfast tune` blocks what DecisionInput rebuilds from the ticks; a
// decision stage fed from it must match the monitor's own, bit for bit, over
// noise, a meter gap and a leak. If this fails, the monitor has changed what
// its decision sees and DecisionInput must follow.
TEST_F(TuningFileTest, DecisionInputRebuildsWhatTheMonitorsDecisionSees) {
  const int in = site_.FindPoint("in"), out = site_.FindPoint("out"), p0 = site_.FindPoint("p0"),
            pl = site_.FindPoint("pL"), t0 = site_.FindPoint("t0"), tl = site_.FindPoint("tL");
  site_.points[out].staleness_s = 5.0;
  site_.segments[0].temperature_filter_s = 60.0;
  const Monitor::Options options;
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site_, options, &why)) << why;
  CusumThresholdTable table;
  ASSERT_TRUE(table.Build(ArlFromBudget(options.decision.false_alarm_interval_s, options.decision.block_s,
                                        static_cast<int>(options.decision.target_fractions.size())),
                          &why))
      << why;
  SegmentDecision replica;
  ASSERT_TRUE(replica.Init(options.decision, site_.segments[0].nominal_flow_kg_s, &table, &why)) << why;
  DecisionInput input(options.decision_inventory_filter_s, options.decision_settle_s);

  std::mt19937_64 rng(20261202);
  std::normal_distribution<double> n01(0.0, 1.0);
  int unavailable = 0, leak_ticks = 0;
  bool valid_seen = false;
  for (int k = 0; k < 6000; ++k) {
    const double t = k;
    const double leak = k >= 5000 ? 4.0 : 0.0;  // 2 % of nominal flow
    m.Feed({in, t, 200.0 * (1.0 + 0.002 * n01(rng)), Quality::kGood});
    if (k < 4200 || k > 4230) m.Feed({out, t, 200.0 * (1.0 + 0.002 * n01(rng)) - leak, Quality::kGood});
    m.Feed({p0, t, 50e5 + 2000.0 * n01(rng), Quality::kGood});
    m.Feed({pl, t, 10e5 + 2000.0 * n01(rng), Quality::kGood});
    m.Feed({t0, t, 291.0 + 0.05 * n01(rng), Quality::kGood});
    m.Feed({tl, t, 287.0 + 0.05 * n01(rng), Quality::kGood});
    m.Advance(t);
    const SegmentTick& tick = m.segment(0);
    input.Tick(tick, k == 0 ? 0.0 : 1.0);
    replica.Step(t, k == 0 ? 0.0 : 1.0, input.valid(), input.imbalance_kg(), input.inventory_rate_kg_s());
    if (tick.status == SegmentStatus::kUnavailable) ++unavailable;
    valid_seen = valid_seen || input.valid();
    const DecisionResult& want = tick.decision;
    const DecisionResult& got = replica.result();
    ASSERT_EQ(DecisionStateName(got.state), std::string(DecisionStateName(want.state))) << "t=" << t;
    ASSERT_EQ(got.bias_kg_s, want.bias_kg_s) << "t=" << t;
    ASSERT_EQ(got.sigma_kg_s, want.sigma_kg_s) << "t=" << t;
    ASSERT_EQ(got.phi, want.phi) << "t=" << t;
    for (int i = 0; i < want.detector_count; ++i)
      ASSERT_EQ(got.detectors[i].statistic, want.detectors[i].statistic) << "t=" << t << " detector " << i;
    if (want.state == DecisionState::kLeak) ++leak_ticks;
  }
  EXPECT_TRUE(valid_seen);
  EXPECT_GT(unavailable, 10);  // the gap happened
  EXPECT_GT(leak_ticks, 0);    // and so did the alarm, so the detectors were compared in earnest
}

}  // namespace
}  // namespace holdfast
