// `holdfast evaluate` (sim/evaluate.h): the theoretical bound, the batch
// file's checks, and a small batch end to end on the demo line.
#include "evaluate.h"

#include <cmath>
#include <filesystem>
#include <fstream>
#include <string>
#include <unistd.h>

#include <gtest/gtest.h>

#include "scenario.h"
#include "site_file.h"

namespace holdfast::sim {
namespace {

const std::string kDemo = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/";

// Lorden (1971, Ann. Math. Statist. 42): the least worst-case delay of a
// procedure with in-control run length gamma is ln(gamma) / I asymptotically,
// I the Kullback-Leibler information per sample; for a Gaussian mean shift
// of delta standard deviations I = delta^2 / 2 (Basseville & Nikiforov 1993,
// "Detection of Abrupt Changes", sec. 5.2; from memory). So 2 ln(gamma) /
// delta^2 samples, and never less than one sample.
TEST(LordenBound, TwoLnArlOverDeltaSquared) {
  EXPECT_NEAR(LordenDelayBound_s(1.0, 1000.0, 60.0), 2.0 * std::log(1000.0) * 60.0, 1e-9);
  EXPECT_NEAR(LordenDelayBound_s(2.0, 129600.0, 60.0), 2.0 * std::log(129600.0) / 4.0 * 60.0, 1e-9);
  EXPECT_DOUBLE_EQ(LordenDelayBound_s(100.0, 1000.0, 60.0), 60.0);  // one block at least
  EXPECT_TRUE(std::isnan(LordenDelayBound_s(0.0, 1000.0, 60.0)));
  EXPECT_TRUE(std::isnan(LordenDelayBound_s(1.0, 1.0, 60.0)));
}

class BatchFile : public ::testing::Test {
 protected:
  void SetUp() override {
    std::vector<ConfigProblem> problems;
    ASSERT_TRUE(LoadSiteFile(kDemo + "quillfen-site.json", &site_, &problems));
    dir_ = std::filesystem::temp_directory_path() / ("holdfast-batch-" + std::to_string(::getpid()));
    std::filesystem::create_directories(dir_);
    std::filesystem::copy_file(kDemo + "quillfen-eval-scenario.json", dir_ / "base.json",
                               std::filesystem::copy_options::overwrite_existing);
  }
  void TearDown() override { std::filesystem::remove_all(dir_); }
  std::vector<std::string> Problems(const std::string& text, BatchSpec* b) {
    const std::string path = (dir_ / "b.json").string();
    std::ofstream(path) << text;
    std::vector<ConfigProblem> problems;
    LoadBatchFile(path, site_, b, &problems);
    std::vector<std::string> out;
    for (const auto& p : problems) out.push_back(p.ToString());
    return out;
  }
  static bool Has(const std::vector<std::string>& lines, const std::string& text) {
    for (const auto& l : lines)
      if (l.find(text) != std::string::npos) return true;
    return false;
  }
  Site site_;
  std::filesystem::path dir_;
};

TEST_F(BatchFile, GoodBatchLoads) {
  BatchSpec b;
  const auto lines = Problems(R"({"format": "holdfast-batch/1", "scenario": "base.json",
      "leak_free": {"days": 2, "shut_in_every_days": 1},
      "grid": {"leak_fractions_pct": [1, 2], "chainages_m": [10000], "onsets_s": [3600], "seeds": [1, 2]}})", &b);
  EXPECT_TRUE(lines.empty()) << lines.front();
  EXPECT_EQ(b.segment, 0);
  EXPECT_EQ(b.leak_fractions.size(), 2u);
  EXPECT_DOUBLE_EQ(b.leak_fractions[1], 0.02);
  EXPECT_EQ(b.seeds.size(), 2u);
  EXPECT_DOUBLE_EQ(b.leak_free_days, 2.0);
  EXPECT_EQ(b.baseline_windows_s.size(), 3u);  // the defaults
}

TEST_F(BatchFile, ProblemsNameTheFileAndPointer) {
  BatchSpec b;
  const auto lines = Problems(R"({"format": "holdfast-batch/2", "scenario": "base.json", "sede": 3,
      "leak_free": {"days": 0.5},
      "grid": {"leak_fractions_pct": [1, -2], "chainages_m": [60000], "onsets_s": [60], "seeds": [1.5]}})", &b);
  EXPECT_TRUE(Has(lines, "b.json:/format: expected \"holdfast-batch/1\"")) << lines.size();
  EXPECT_TRUE(Has(lines, "b.json:/sede: unknown key"));
  EXPECT_TRUE(Has(lines, "b.json:/leak_free/days: must be in [1, 3650]"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/leak_fractions_pct/1: must be in (0, 100]"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/chainages_m/0: must be in [0, 48000]"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/onsets_s/0: must be in [1800"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/seeds: seeds must be integers"));
}

TEST_F(BatchFile, MissingScenarioAndParseErrors) {
  BatchSpec b;
  auto lines = Problems(R"({"format": "holdfast-batch/1", "scenario": "nope.json", "leak_free": {}, "grid": {}})", &b);
  EXPECT_TRUE(Has(lines, "b.json:/scenario:")) << lines.front();
  EXPECT_TRUE(Has(lines, "nope.json: cannot read the file"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/chainages_m: missing required field"));
  lines = Problems("{\"format\": ", &b);
  EXPECT_TRUE(Has(lines, "parse error"));
}

// A small batch end to end: one tuning day, one leak-free day, two leaks of
// 2 % of nominal flow. Every run simulates, the leaks are found, the
// baseline rows and the bound are there, and the tables carry the caution.
TEST_F(BatchFile, SmallBatchRunsEndToEnd) {
  BatchSpec b;
  const auto lines = Problems(R"({"format": "holdfast-batch/1", "scenario": "base.json",
      "tuning": {"days": 1, "seed": 11}, "leak_free": {"days": 1, "seed": 12, "shut_in_every_days": 0},
      "grid": {"leak_fractions_pct": [2], "chainages_m": [12000, 36000], "onsets_s": [3600], "seeds": [1],
               "observe_s": 3600},
      "baseline": {"windows_s": [600]}})", &b);
  ASSERT_TRUE(lines.empty()) << lines.front();
  EvaluationResult r;
  std::string why;
  EvaluateOptions o;
  o.jobs = 2;
  ASSERT_TRUE(RunEvaluation(site_, b, o, &r, &why)) << why;
  ASSERT_EQ(r.runs.size(), 4u);
  for (const RunOutcome& run : r.runs) {
    EXPECT_TRUE(run.error.empty()) << run.error;
    EXPECT_LT(std::fabs(run.sim_residual_rel), 1e-6);  // the simulator's own mass budget
  }
  EXPECT_GT(r.sigma_kg_s, 0.0);
  ASSERT_EQ(r.sizes.size(), 1u);
  const SizeRows& s = r.sizes[0];
  ASSERT_EQ(s.rows.size(), 3u);  // holdfast, one baseline, the bound
  EXPECT_EQ(s.rows[0].method, "holdfast");
  EXPECT_EQ(s.rows[0].detected, 2);
  EXPECT_LT(s.rows[0].ttd_p90_s, 1800.0);
  EXPECT_EQ(s.rows[1].method, "baseline 10 min");
  EXPECT_EQ(s.rows[2].method, "bound (Lorden)");
  // The bound is below what any procedure achieves, the monitor included.
  EXPECT_LE(s.rows[2].ttd_median_s, s.rows[0].ttd_median_s);
  const std::string md = r.SummaryMarkdown();
  EXPECT_NE(md.find("supplementary monitoring aid"), std::string::npos);
  EXPECT_NE(md.find("| holdfast |"), std::string::npos);
  EXPECT_NE(r.RunsCsv().find("leak,0,1,0.02,12000"), std::string::npos) << r.RunsCsv();
}

// Exact Poisson limits (Garwood 1936). n = 0: the upper limit solves
// e^-mu = 0.025, mu = -ln 0.025 = 3.6889; n = 1: the lower solves
// 1 - e^-mu = 0.025, mu = -ln 0.975 = 0.025318, the upper
// e^-mu (1 + mu) = 0.025 (5.5716 in published tables, from memory); n = 10:
// 4.7954 and 18.3904 (published tables, from memory).
TEST(PoissonInterval, GarwoodLimits) {
  double lo = 0.0, hi = 0.0;
  PoissonInterval95(0, &lo, &hi);
  EXPECT_DOUBLE_EQ(lo, 0.0);
  EXPECT_NEAR(hi, -std::log(0.025), 1e-9);
  PoissonInterval95(1, &lo, &hi);
  EXPECT_NEAR(lo, -std::log(0.975), 1e-9);
  EXPECT_NEAR(std::exp(-hi) * (1.0 + hi), 0.025, 1e-12);
  EXPECT_NEAR(hi, 5.5716, 1e-4);
  PoissonInterval95(10, &lo, &hi);
  EXPECT_NEAR(lo, 4.7954, 1e-3);
  EXPECT_NEAR(hi, 18.3904, 1e-3);
}

// Clock onsets with the daily operations, the cycled design, ruptures and
// the rough family: the plan counts, and every run's scenario compiles.
TEST_F(BatchFile, ClockOnsetsRupturesAndFamilies) {
  BatchSpec b;
  const auto lines = Problems(R"({"format": "holdfast-batch/1", "scenario": "base.json",
      "instrument_families": ["standard", "rough"],
      "leak_free": {"days": 2, "shut_in_every_days": 1, "shut_in_at_s": 72000, "shut_in_s": 36000,
        "daily_operations": [
          {"at_s": 21600, "action": "setpoint", "target": "TJ-FT-201", "flow": {"value": 0, "unit": "t/h"}, "ramp_s": 120},
          {"at_s": 64800, "action": "setpoint", "target": "TJ-FT-201", "flow": {"value": 150, "unit": "t/h"}, "ramp_s": 120}]},
      "grid": {"leak_fractions_pct": [1, 2], "chainages_m": [10000, 30000], "onset_hours": [0, 7, 20],
               "lead_s": 7200, "onsets_during_operations": true, "design": "cycle", "seeds": [1],
               "observe_s": 3600},
      "ruptures": {"fractions_pct": [10, 30], "ramp_s": 2, "observe_s": 900}})", &b);
  ASSERT_TRUE(lines.empty()) << lines.front();
  ASSERT_EQ(b.families.size(), 2u);
  // 5 onsets (3 hours + 2 operations): 2 sizes x 5 + 2 ruptures x 5.
  EXPECT_EQ(LeakRunCount(b), 20u);
  b.design = "cross";
  EXPECT_EQ(LeakRunCount(b), 30u);  // 2 sizes x 2 chainages x 5 onsets + 10 ruptures
  b.design = "cycle";
  for (const char* family : {"standard", "rough"}) {
    b.family = family;
    const auto docs = LeakRunDocs(b);
    ASSERT_EQ(docs.size(), 20u);
    for (size_t i = 0; i < docs.size(); ++i) {
      Scenario sc;
      std::vector<ConfigProblem> problems;
      EXPECT_TRUE(CompileScenario(docs[i], site_, &sc, &problems))
          << family << " run " << i << ": " << (problems.empty() ? "" : problems.front().ToString());
    }
    // Onset 07:00: the run starts at 05:00; the delivery closed at 06:00
    // (clock) is at 3600 s; the previous evening's reopening is the initial
    // setting; the leak opens at the lead time.
    const nlohmann::json& d = docs[1];
    EXPECT_EQ(d["start"], "2026-04-06T05:00:00.000Z");
    EXPECT_DOUBLE_EQ(d["leaks"][0]["onset_s"].get<double>(), 7200.0);
    ASSERT_EQ(d["operations"].size(), 1u);
    EXPECT_DOUBLE_EQ(d["operations"][0]["at_s"].get<double>(), 3600.0);
    EXPECT_DOUBLE_EQ(d["laterals"]["TJ-FT-201"]["flow"]["value"].get<double>(), 150.0);
    // Onset 00:00: starts 22:00 the day before, with the delivery as the
    // evening left it.
    EXPECT_EQ(docs[0]["start"], "2026-04-05T22:00:00.000Z");
    // The ruptures open in 2 s.
    EXPECT_DOUBLE_EQ(docs[10]["leaks"][0]["ramp_s"].get<double>(), 2.0);
    if (b.family == "rough") {
      const nlohmann::json& pt = d["instruments"]["CF-PT-101"];
      EXPECT_NEAR(pt["noise"].get<double>(), 2.5 * 0.02, 1e-12);  // the site's random accuracy, bar
      EXPECT_NEAR(pt["wander_phi"].get<double>(), 0.95 * 0.95, 1e-12);  // 2 s sampling in the base scenario
      EXPECT_DOUBLE_EQ(pt["heartbeat_s"].get<double>(), 60.0);
      EXPECT_NEAR(d["instruments"]["CF-FT-101"]["noise_pct"].get<double>(), 0.25, 1e-12);
    } else {
      EXPECT_FALSE(d["instruments"]["CF-PT-101"].contains("wander_phi"));
    }
  }
  // An operation exactly at a run's start is part of its initial state:
  // onset 08:00 with a 2 h lead starts at 06:00, when the delivery closes.
  b.onset_hours = {8.0};
  b.onsets_during_operations = false;
  b.rupture_fractions.clear();
  b.leak_fractions = {0.01};
  {
    const auto docs = LeakRunDocs(b);
    ASSERT_EQ(docs.size(), 1u);
    EXPECT_DOUBLE_EQ(docs[0]["laterals"]["TJ-FT-201"]["flow"]["value"].get<double>(), 0.0);
    EXPECT_TRUE(docs[0]["operations"].empty());  // it reopens at 18:00, after the run's 3 h
  }
  // A 10 h shut-in from 20:00 runs past midnight; the month still compiles.
  b.family = "standard";
  const nlohmann::json free = LeakFreeRunDoc(b, 2.0, 5);
  Scenario sc;
  std::vector<ConfigProblem> problems;
  EXPECT_TRUE(CompileScenario(free, site_, &sc, &problems)) << (problems.empty() ? "" : problems.front().ToString());
  int shut_ins = 0;
  for (const auto& op : free["operations"]) {
    if (op["action"] == "shut_in") ++shut_ins;
    const double at = op["at_s"].get<double>();
    // No daily operation inside a shut-in (with its half-hour clearance).
    if (op["action"] == "setpoint") {
      EXPECT_FALSE(at > 72000.0 - 1800.0 && at < 72000.0 + 36000.0 + 1800.0) << at;
    }
  }
  EXPECT_EQ(shut_ins, 1);  // day 1's; day 2's would end after the run
}

TEST_F(BatchFile, NewKeysAreChecked) {
  BatchSpec b;
  const auto lines = Problems(R"({"format": "holdfast-batch/1", "scenario": "base.json",
      "instrument_families": ["standard", "smooth", "standard"], "leak_free": {"shut_in_s": 90000},
      "grid": {"leak_fractions_pct": [1], "chainages_m": [10000], "onsets_s": [3600], "onset_hours": [24],
               "design": "diagonal", "seeds": [1]},
      "ruptures": {"ramp_s": 2}})", &b);
  EXPECT_TRUE(Has(lines, "b.json:/instrument_families/1: must be \"standard\" or \"rough\""));
  EXPECT_TRUE(Has(lines, "b.json:/instrument_families/2: listed twice"));
  EXPECT_TRUE(Has(lines, "b.json:/leak_free/shut_in_s: must be in [600, 82800]"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/onsets_s: give either onsets_s"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/design: must be \"cross\" or \"cycle\""));
  EXPECT_TRUE(Has(lines, "b.json:/ruptures/fractions_pct: missing required field"));
}

}  // namespace
}  // namespace holdfast::sim
