// Checked JSON (holdfast/json_check.h): duplicate keys at their pointer,
// parse errors at source:line:column, and each reader's accept and reject
// cases with the pointer of the field.
#include <string>
#include <vector>

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include "holdfast/json_check.h"

namespace holdfast {
namespace {

using nlohmann::json;

std::string All(const std::vector<ConfigProblem>& problems) {
  std::string out;
  for (const ConfigProblem& p : problems) out += p.ToString() + "\n";
  return out;
}

// --- ParseJsonText ----------------------------------------------------------------

TEST(ParseJsonText, CleanTextParses) {
  json doc;
  std::vector<ConfigProblem> problems;
  EXPECT_TRUE(ParseJsonText(R"({"a": [1, {"b": 2}], "c": "x"})", "t.json", &doc, &problems));
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(doc["a"][1]["b"], 2);
}

TEST(ParseJsonText, DuplicateKeyIsReportedAtItsNestedPointer) {
  json doc;
  std::vector<ConfigProblem> problems;
  const std::string text = R"({"segments": [{"id": "S1"}, {"id": "S2", "length_m": 5, "id": "S3"}]})";
  EXPECT_FALSE(ParseJsonText(text, "site.json", &doc, &problems));
  ASSERT_EQ(problems.size(), 1u) << All(problems);
  EXPECT_EQ(problems[0].path, "/segments/1/id");
  EXPECT_NE(problems[0].message.find("duplicate key \"id\""), std::string::npos) << problems[0].message;
  EXPECT_EQ(doc["segments"][1]["id"], "S3");  // parsed all the same (JSON keeps the last)
}

TEST(ParseJsonText, DuplicateKeyAfterNestedContainersAndEscapedToken) {
  json doc;
  std::vector<ConfigProblem> problems;
  const std::string text = R"({"a/b": {"x": [[1, 2], {"y": 1}], "z": {}, "z": 1}, "top": 1, "top": 2})";
  EXPECT_FALSE(ParseJsonText(text, "t", &doc, &problems));
  ASSERT_EQ(problems.size(), 2u) << All(problems);
  EXPECT_EQ(problems[0].path, "/a~1b/z");
  EXPECT_EQ(problems[1].path, "/top");
}

TEST(ParseJsonText, SameKeyInDifferentObjectsIsFine) {
  json doc;
  std::vector<ConfigProblem> problems;
  EXPECT_TRUE(ParseJsonText(R"([{"id": 1}, {"id": 2}, {"a": {"id": 3}}])", "t", &doc, &problems)) << All(problems);
}

TEST(ParseJsonText, ParseErrorNamesSourceLineAndColumn) {
  json doc;
  std::vector<ConfigProblem> problems;
  EXPECT_FALSE(ParseJsonText("{\n  \"a\": 1,\n  \"b\": ]\n}\n", "site.json", &doc, &problems));
  ASSERT_EQ(problems.size(), 1u) << All(problems);
  EXPECT_EQ(problems[0].path, "site.json:3:8");
  EXPECT_EQ(problems[0].message.rfind("parse error: ", 0), 0u) << problems[0].message;
}

TEST(ParseJsonText, TruncatedTextSaysSo) {
  json doc;
  std::vector<ConfigProblem> problems;
  EXPECT_FALSE(ParseJsonText("{\"a\": [1, 2", "t.json", &doc, &problems));
  ASSERT_EQ(problems.size(), 1u);
  EXPECT_EQ(problems[0].path.rfind("t.json:1:", 0), 0u) << problems[0].path;
  EXPECT_NE(problems[0].message.find("truncated"), std::string::npos) << problems[0].message;
}

// --- Readers ----------------------------------------------------------------------

class Readers : public ::testing::Test {
 protected:
  json doc = json::parse(R"({
    "n": 2.5, "neg": -3, "zero": 0, "s": "abc", "empty": "", "b": true, "whole": 4, "half": 4.5,
    "o": {"k": 1}, "a": [1, 2, 3], "kind": "pressure", "typo": "presure"})");
  std::vector<ConfigProblem> problems;
  JsonCheck check{&problems};

  std::string Only() {
    EXPECT_EQ(problems.size(), 1u) << All(problems);
    return problems.empty() ? std::string() : problems[0].ToString();
  }
};

TEST_F(Readers, Number) {
  double v = 0.0;
  EXPECT_EQ(check.Number(doc, "n", "/p", Need::kRequired, &v), Got::kOk);
  EXPECT_EQ(v, 2.5);
  EXPECT_EQ(check.Number(doc, "missing", "/p", Need::kOptional, &v), Got::kAbsent);
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.Number(doc, "s", "/p", Need::kRequired, &v), Got::kBad);
  EXPECT_EQ(Only(), "/p/s: must be a number (got a string \"abc\")");
  problems.clear();
  EXPECT_EQ(check.Number(doc, "missing", "/p", Need::kRequired, &v), Got::kAbsent);
  EXPECT_EQ(Only(), "/p/missing: missing required field \"missing\" (a number)");
  EXPECT_EQ(v, 2.5);  // untouched
}

TEST_F(Readers, Range) {
  double v = 0.0;
  EXPECT_EQ(check.Range(doc, "n", "", Need::kRequired, 0.0, 2.5, &v), Got::kOk);
  EXPECT_EQ(check.Range(doc, "zero", "", Need::kRequired, 0.0, 1.0, &v), Got::kOk);
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.Range(doc, "n", "", Need::kRequired, 0.0, 2.5, &v, false, true), Got::kBad);
  EXPECT_EQ(Only(), "/n: must be in [0, 2.5) (got 2.5)");
  problems.clear();
  EXPECT_EQ(check.Range(doc, "zero", "", Need::kRequired, 0.0, 1.0, &v, true), Got::kBad);
  EXPECT_EQ(Only(), "/zero: must be in (0, 1] (got 0)");
  problems.clear();
  EXPECT_EQ(check.RangeValue(doc["a"][2], "/a/2", 0.0, 2.0, &v), Got::kBad);
  EXPECT_EQ(Only(), "/a/2: must be in [0, 2] (got 3)");
}

TEST_F(Readers, PositiveAndNonNegative) {
  double v = 0.0;
  EXPECT_EQ(check.Positive(doc, "n", "", Need::kRequired, &v), Got::kOk);
  EXPECT_EQ(check.NonNegative(doc, "zero", "", Need::kRequired, &v), Got::kOk);
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.Positive(doc, "zero", "", Need::kRequired, &v), Got::kBad);
  EXPECT_EQ(Only(), "/zero: must be positive (got 0)");
  problems.clear();
  EXPECT_EQ(check.NonNegative(doc, "neg", "", Need::kRequired, &v), Got::kBad);
  EXPECT_EQ(Only(), "/neg: must not be negative (got -3)");
}

TEST_F(Readers, Integer) {
  int v = 0;
  EXPECT_EQ(check.Integer(doc, "whole", "", Need::kRequired, 0, 10, &v), Got::kOk);
  EXPECT_EQ(v, 4);
  EXPECT_EQ(check.Integer(doc, "half", "", Need::kRequired, 0, 10, &v), Got::kBad);
  EXPECT_EQ(Only(), "/half: must be a whole number (got 4.5)");
  problems.clear();
  EXPECT_EQ(check.Integer(doc, "whole", "", Need::kRequired, 5, 10, &v), Got::kBad);
  EXPECT_EQ(Only(), "/whole: must be between 5 and 10 (got 4)");
}

TEST_F(Readers, StringAndBool) {
  std::string s;
  bool b = false;
  EXPECT_EQ(check.String(doc, "s", "", Need::kRequired, &s), Got::kOk);
  EXPECT_EQ(s, "abc");
  EXPECT_EQ(check.Bool(doc, "b", "", Need::kRequired, &b), Got::kOk);
  EXPECT_TRUE(b);
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.String(doc, "empty", "", Need::kRequired, &s), Got::kBad);
  EXPECT_EQ(Only(), "/empty: must not be empty");
  problems.clear();
  EXPECT_EQ(check.Bool(doc, "n", "", Need::kRequired, &b), Got::kBad);
  EXPECT_EQ(Only(), "/n: must be true or false (got a number (2.5))");
}

TEST_F(Readers, Enum) {
  const std::vector<std::string> kinds = {"flow", "pressure", "temperature"};
  std::string k;
  EXPECT_EQ(check.Enum(doc, "kind", "/points/P", Need::kRequired, kinds, &k), Got::kOk);
  EXPECT_EQ(k, "pressure");
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.Enum(doc, "typo", "/points/P", Need::kRequired, kinds, &k), Got::kBad);
  EXPECT_EQ(Only(),
            "/points/P/typo: unknown typo \"presure\" (did you mean \"pressure\"?); accepted: flow, pressure, "
            "temperature");
  problems.clear();
  EXPECT_EQ(check.Enum(doc, "none", "", Need::kRequired, kinds, &k), Got::kAbsent);
  EXPECT_EQ(Only(), "/none: missing required field \"none\" (one of: flow, pressure, temperature)");
}

TEST_F(Readers, EnumTable) {
  enum class Kind { kFlow, kPressure };
  const EnumName<Kind> table[] = {{"flow", Kind::kFlow}, {"pressure", Kind::kPressure}};
  Kind k = Kind::kFlow;
  EXPECT_EQ(check.Enum(doc, "kind", "", Need::kRequired, table, &k), Got::kOk);
  EXPECT_EQ(k, Kind::kPressure);
  EXPECT_EQ(check.Enum(doc, "s", "", Need::kRequired, table, &k), Got::kBad);
  EXPECT_EQ(k, Kind::kPressure);
  EXPECT_NE(Only().find("/s: unknown s \"abc\"; accepted: flow, pressure"), std::string::npos);
}

TEST_F(Readers, ObjectArrayAndArrayAtMost) {
  const json* m = nullptr;
  EXPECT_EQ(check.Object(doc, "o", "", Need::kRequired, &m), Got::kOk);
  EXPECT_EQ(m, &doc["o"]);
  EXPECT_EQ(check.Array(doc, "a", "", Need::kRequired, &m), Got::kOk);
  EXPECT_EQ(check.ArrayAtMost(doc, "a", "", Need::kRequired, 3, "points", &m), Got::kOk);
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.Object(doc, "a", "", Need::kRequired, &m), Got::kBad);
  EXPECT_EQ(Only(), "/a: must be an object (got an array)");
  problems.clear();
  EXPECT_EQ(check.Array(doc, "o", "", Need::kRequired, &m), Got::kBad);
  EXPECT_EQ(Only(), "/o: must be an array (got an object)");
  problems.clear();
  EXPECT_EQ(check.ArrayAtMost(doc, "a", "", Need::kRequired, 2, "points", &m), Got::kBad);
  EXPECT_EQ(Only(), "/a: at most 2 points (got 3)");
  problems.clear();
  EXPECT_TRUE(check.ElementObject(doc["o"], "/o"));
  EXPECT_FALSE(check.ElementObject(doc["a"][0], "/a/0"));
  EXPECT_EQ(Only(), "/a/0: must be an object (got a number (1))");
}

TEST_F(Readers, ExactKeys) {
  const json obj = json::parse(R"({"length_m": 1, "_comment": "ignored", "lenght_m": 2, "colour": 3})");
  check.ExactKeys(obj, "/segments/0", {"length_m", "diameter_m"});
  ASSERT_EQ(problems.size(), 2u) << All(problems);
  EXPECT_EQ(problems[0].ToString(),
            "/segments/0/colour: unknown key \"colour\"; accepted here: length_m, diameter_m");
  EXPECT_EQ(problems[1].ToString(),
            "/segments/0/lenght_m: unknown key \"lenght_m\" (did you mean \"length_m\"?); accepted here: length_m, "
            "diameter_m");
  problems.clear();
  check.ExactKeys(json::parse(R"({"length_m": 1, "diameter_m": 2})"), "", {"length_m", "diameter_m"});
  EXPECT_TRUE(problems.empty()) << All(problems);
}

TEST_F(Readers, QuantityWithUnit) {
  const json obj = json::parse(R"({"p": {"value": 2, "unit": "bar"}, "q": {"value": 2, "unit": "bar"},
                                   "r": {"value": 2, "unit": "m3/hr"}, "s": 5})");
  double si = 0.0;
  UnitConversion c;
  EXPECT_EQ(check.Qty(obj, "p", "", Need::kRequired, {Quantity::kPressure}, &si, &c), Got::kOk);
  EXPECT_DOUBLE_EQ(si, 2e5);
  EXPECT_EQ(c.quantity, Quantity::kPressure);
  EXPECT_TRUE(problems.empty()) << All(problems);
  EXPECT_EQ(check.Qty(obj, "q", "", Need::kRequired, {Quantity::kMassFlow, Quantity::kVolumeFlow}, &si), Got::kBad);
  EXPECT_NE(Only().find("/q/unit: unit \"bar\" is a pressure unit, expected a mass flow or volume flow unit"),
            std::string::npos);
  problems.clear();
  EXPECT_EQ(check.Qty(obj, "r", "", Need::kRequired, {Quantity::kMassFlow, Quantity::kVolumeFlow}, &si), Got::kBad);
  EXPECT_NE(Only().find("/r/unit: unknown mass flow or volume flow unit \"m3/hr\" (did you mean \"m3/h\"?)"),
            std::string::npos);
  problems.clear();
  EXPECT_EQ(check.Qty(obj, "s", "", Need::kRequired, {Quantity::kPressure}, &si), Got::kBad);
  EXPECT_NE(Only().find("/s: must be a quantity {\"value\": number, \"unit\": \"name\"} (got a number (5))"),
            std::string::npos);
}

TEST(JsonCheck, FileNamePrefixesEveryPath) {
  std::vector<ConfigProblem> problems;
  JsonCheck check(&problems, "year.json");
  double v = 0.0;
  check.Number(json::object(), "volume_m3", "/system_input/0", Need::kRequired, &v);
  check.Add("", "the document must be a JSON object");
  ASSERT_EQ(problems.size(), 2u);
  EXPECT_EQ(problems[0].path, "year.json:/system_input/0/volume_m3");
  EXPECT_EQ(problems[1].path, "year.json");
}

}  // namespace
}  // namespace holdfast
