// `holdfast evaluate` (sim/evaluate.h): the theoretical bound, the batch
// file's checks, and a small batch end to end on the demo line.
#include "evaluate.h"

#include <cmath>
#include <filesystem>
#include <fstream>
#include <string>
#include <unistd.h>

#include <gtest/gtest.h>

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
    ASSERT_TRUE(LoadSiteFile(kDemo + "kestrel-site.json", &site_, &problems));
    dir_ = std::filesystem::temp_directory_path() / ("holdfast-batch-" + std::to_string(::getpid()));
    std::filesystem::create_directories(dir_);
    std::filesystem::copy_file(kDemo + "kestrel-eval-scenario.json", dir_ / "base.json",
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
  EXPECT_TRUE(Has(lines, "nope.json: cannot open"));
  EXPECT_TRUE(Has(lines, "b.json:/grid/chainages_m: is required"));
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

}  // namespace
}  // namespace holdfast::sim
