#include "payload.h"

#include <cmath>
#include <string>

#include <gtest/gtest.h>

#include "command.h"
#include "topics.h"

namespace holdfast::daemon {
namespace {

const PointIndex kPoints = {{"FT-1", 0}, {"PT-1", 1}};

ParseResult Parse(const std::string& payload, const std::string& point, std::vector<Reading>* out,
                  PayloadLimits limits = {}) {
  return ParseReadings(payload, point, kPoints, limits, out);
}

TEST(Payload, OneReadingIsoTime) {
  std::vector<Reading> out;
  const ParseResult r = Parse(R"({"time":"2026-03-14T06:00:00.250Z","value":907.5,"quality":"uncertain"})", "FT-1", &out);
  ASSERT_EQ(r.accepted, 1u) << r.first_error;
  EXPECT_EQ(out[0].point, 0);
  EXPECT_DOUBLE_EQ(out[0].time_s, 1773468000.25);
  EXPECT_DOUBLE_EQ(out[0].value, 907.5);
  EXPECT_EQ(out[0].quality, Quality::kUncertain);
}

TEST(Payload, BatchWithEpochTimesAndOneBadItem) {
  std::vector<Reading> out;
  const ParseResult r = Parse(
      R"([{"point":"FT-1","time":1773468000,"value":1},{"point":"PT-1","time":1773468000.5,"value":"2"},
          {"point":"PT-1","time":1773468001,"value":3,"quality":"bad"}])",
      "", &out);
  EXPECT_EQ(r.accepted, 2u);
  EXPECT_EQ(r.rejected[static_cast<int>(Reject::kWrongType)], 1u);
  EXPECT_EQ(r.first_error, "[1].value: must be a number");
  ASSERT_EQ(out.size(), 2u);
  EXPECT_EQ(out[1].quality, Quality::kBad);
}

struct Case {
  const char* payload;
  const char* point;
  Reject reason;
};

TEST(Payload, EveryRejectionIsCountedAndNamed) {
  const Case cases[] = {
      {"nope", "FT-1", Reject::kMalformedJson},
      {"[[[[[[[[1]]]]]]]]", "", Reject::kMalformedJson},
      {R"("text")", "FT-1", Reject::kWrongShape},
      {"[]", "", Reject::kWrongShape},
      {R"([1])", "", Reject::kWrongShape},
      {R"({"time":1773468000,"value":1})", "", Reject::kMissingField},
      {R"({"value":1})", "FT-1", Reject::kMissingField},
      {R"({"time":1773468000})", "FT-1", Reject::kMissingField},
      {R"({"time":1773468000,"value":1})", "XX-9", Reject::kUnknownPoint},
      {R"({"time":1773468000,"value":1,"unit":"bar"})", "FT-1", Reject::kUnknownField},
      {R"({"time":true,"value":1})", "FT-1", Reject::kWrongType},
      {R"({"time":1773468000,"value":null})", "FT-1", Reject::kWrongType},
      {R"({"time":"2026-03-14 06:00:00","value":1})", "FT-1", Reject::kBadTime},
      {R"({"time":"soon","value":1})", "FT-1", Reject::kBadTime},
      {R"({"time":12,"value":1})", "FT-1", Reject::kAbsurdTime},
      {R"({"time":"2150-01-01T00:00:00Z","value":1})", "FT-1", Reject::kAbsurdTime},
      {R"({"time":1773468000,"value":1,"quality":"fine"})", "FT-1", Reject::kBadQuality},
      {R"({"time":1773468000,"value":1,"quality":""})", "FT-1", Reject::kBadQuality},
      {R"({"point":"PT-1","time":1773468000,"value":1})", "FT-1", Reject::kWrongShape},
  };
  for (const Case& c : cases) {
    std::vector<Reading> out;
    const ParseResult r = Parse(c.payload, c.point, &out);
    EXPECT_EQ(r.accepted, 0u) << c.payload;
    EXPECT_EQ(r.rejected[static_cast<int>(c.reason)], 1u) << c.payload << " -> " << r.first_error;
    EXPECT_FALSE(r.first_error.empty()) << c.payload;
    EXPECT_TRUE(out.empty());
  }
}

TEST(Payload, NumbersTooLargeForADoubleAreNotNumbers) {
  std::vector<Reading> out;
  const ParseResult r = Parse(R"({"time":1773468000,"value":1e999})", "FT-1", &out);
  EXPECT_EQ(r.accepted, 0u);
  EXPECT_EQ(r.rejected_total(), 1u);
  EXPECT_EQ(r.rejected[static_cast<int>(Reject::kNotFinite)], 1u);  // counted as not_finite (issue 11)
}

TEST(Payload, NonFiniteValuesAreCountedAsNotFinite) {
  for (const char* p : {R"({"time":1773468000,"value":NaN})", R"({"time":1773468000,"value":-Infinity})",
                        R"({"time":1773468000,"value":"NaN"})", R"({"time":1773468000,"value":-1e400})"}) {
    std::vector<Reading> out;
    const ParseResult r = Parse(p, "FT-1", &out);
    EXPECT_EQ(r.rejected[static_cast<int>(Reject::kNotFinite)], 1u) << p;
  }
  std::vector<Reading> out;  // a NaN inside a string of a malformed payload is not a value
  const ParseResult r = Parse(R"({"time":"NaN", "value": })", "FT-1", &out);
  EXPECT_EQ(r.rejected[static_cast<int>(Reject::kMalformedJson)], 1u);
}

TEST(Payload, LimitsOnSizeBatchAndClock) {
  PayloadLimits limits;
  limits.max_payload_bytes = 100;
  limits.max_batch = 2;
  limits.now_s = 1773468000.0;
  limits.max_future_s = 600.0;
  std::vector<Reading> out;
  EXPECT_EQ(Parse(std::string(101, ' '), "FT-1", &out, limits).rejected[static_cast<int>(Reject::kOversized)], 1u);
  EXPECT_EQ(Parse(R"([{"time":1,"value":1},{},{}])", "FT-1", &out, limits)
                .rejected[static_cast<int>(Reject::kBatchTooLarge)], 1u);
  EXPECT_EQ(Parse(R"({"time":1773468700,"value":1})", "FT-1", &out, limits)
                .rejected[static_cast<int>(Reject::kAbsurdTime)], 1u);
  EXPECT_EQ(Parse(R"({"time":1773468500,"value":1})", "FT-1", &out, limits).accepted, 1u);
}

TEST(Topics, ClassifyTheTree) {
  TopicTree t("holdfast/v1/quillfen");
  EXPECT_EQ(t.Classify("holdfast/v1/quillfen/readings").kind, TopicKind::kBatchReadings);
  const TopicMatch m = t.Classify("holdfast/v1/quillfen/readings/CF-FT-101");
  EXPECT_EQ(m.kind, TopicKind::kPointReadings);
  EXPECT_EQ(m.arg, "CF-FT-101");
  EXPECT_EQ(t.Classify("holdfast/v1/quillfen/commands/alice").arg, "alice");
  EXPECT_EQ(t.Classify("holdfast/v1/quillfen/commands/alice/x").kind, TopicKind::kUnknown);
  EXPECT_EQ(t.Classify("holdfast/v1/quillfenX/readings").kind, TopicKind::kUnknown);
  EXPECT_EQ(t.Classify("holdfast/v1/quillfen/readings/").kind, TopicKind::kUnknown);
  EXPECT_EQ(t.Classify("holdfast/v1/quillfen/events/QS-1").kind, TopicKind::kUnknown);
  EXPECT_EQ(t.Events("QS-1"), "holdfast/v1/quillfen/events/QS-1");
}

TEST(Command, ValidShelve) {
  CommandRequest req;
  std::string error;
  const SegmentIndex segs = {{"QS-1", 0}};
  ASSERT_EQ(ParseCommand(R"({"id":"c-1","segment":"QS-1","alarm":"leak","command":"shelve","duration_s":600,
                             "user":"alice","reason":"pigging"})",
                         "alice", segs, {"alice"}, &req, &error),
            CommandError::kNone)
      << error;
  EXPECT_EQ(req.command, AlarmCommand::kShelve);
  EXPECT_EQ(req.duration_s, 600.0);
  EXPECT_EQ(req.user, "alice");
  EXPECT_EQ(req.reason, "pigging");
}

TEST(Command, Rejections) {
  const SegmentIndex segs = {{"QS-1", 0}};
  const std::vector<std::string> ops = {"alice"};
  struct C {
    const char* payload;
    const char* user;
    CommandError e;
  } cases[] = {
      {"{", "alice", CommandError::kMalformedJson},
      {R"({"segment":"QS-1","alarm":"leak","command":"acknowledge"})", "alice", CommandError::kBadField},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"acknowledge"})", "mallory", CommandError::kNotAuthorised},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"acknowledge","user":"bob"})", "alice",
       CommandError::kUserMismatch},
      {R"({"id":"1","segment":"QS-2","alarm":"leak","command":"acknowledge"})", "alice", CommandError::kUnknownSegment},
      {R"({"id":"1","segment":"QS-1","alarm":"flood","command":"acknowledge"})", "alice", CommandError::kBadField},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"suppress"})", "alice", CommandError::kBadField},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"shelve"})", "alice", CommandError::kBadField},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"shelve","duration_s":-5})", "alice",
       CommandError::kBadField},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"acknowledge","duration_s":5})", "alice",
       CommandError::kBadField},
      {R"({"id":"1","segment":"QS-1","alarm":"leak","command":"acknowledge","sudo":true})", "alice",
       CommandError::kBadField},
  };
  for (const C& c : cases) {
    CommandRequest req;
    std::string error;
    EXPECT_EQ(ParseCommand(c.payload, c.user, segs, ops, &req, &error), c.e) << c.payload << ": " << error;
    EXPECT_FALSE(error.empty());
  }
}

}  // namespace
}  // namespace holdfast::daemon
