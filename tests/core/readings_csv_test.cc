// The readings file layer: ParseTime / FormatIsoUtc, and the streaming CSV
// reader on temporary files (header, comments, CRLF, bad rows with their line
// numbers, block boundaries, over-long lines).
//
// Expected epoch values were computed independently of this code with
// Python's calendar.timegm (proleptic Gregorian, UTC), e.g.
//   calendar.timegm((2026, 3, 14, 6, 0, 0)) == 1773468000
// and are written here as literals.
#include "readings_csv.h"

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "holdfast/aligner.h"
#include "holdfast/site.h"

namespace holdfast {
namespace {

// ---------------------------------------------------------------------------
// ParseTime and FormatIsoUtc.
// ---------------------------------------------------------------------------

double Parsed(const char* text) {
  double t = -12345.0;
  EXPECT_TRUE(ParseTime(text, &t)) << text;
  return t;
}

bool Rejects(const char* text) {
  double t = -12345.0;
  const bool ok = ParseTime(text, &t);
  return !ok && t == -12345.0;  // the output is untouched on failure
}

TEST(ParseTime, KnownEpochs) {
  // calendar.timegm((1970, 1, 1, 0, 0, 0)) == 0
  EXPECT_EQ(Parsed("1970-01-01T00:00:00Z"), 0.0);
  // calendar.timegm((2026, 3, 14, 6, 0, 0)) == 1773468000
  EXPECT_EQ(Parsed("2026-03-14T06:00:00Z"), 1773468000.0);
  EXPECT_EQ(Parsed("2026-03-14T06:00:00.000Z"), 1773468000.0);
  // calendar.timegm((2000, 1, 1, 0, 0, 0)) == 946684800
  EXPECT_EQ(Parsed("2000-01-01T00:00:00Z"), 946684800.0);
  // calendar.timegm((1999, 12, 31, 23, 59, 59)) == 946684799
  EXPECT_EQ(Parsed("1999-12-31T23:59:59Z"), 946684799.0);
  // calendar.timegm((2100, 3, 1, 0, 0, 0)) == 4107542400 (2100 is not a leap year)
  EXPECT_EQ(Parsed("2100-03-01T00:00:00Z"), 4107542400.0);
  // Lower-case z and a space instead of T are accepted.
  EXPECT_EQ(Parsed("2026-03-14 06:00:00z"), 1773468000.0);
  // Surrounding blanks (and a CR left by CRLF files) are ignored.
  EXPECT_EQ(Parsed("  2026-03-14T06:00:00Z\r"), 1773468000.0);
}

TEST(ParseTime, LeapDay) {
  // calendar.timegm((2024, 2, 29, 12, 34, 56)) == 1709210096
  EXPECT_EQ(Parsed("2024-02-29T12:34:56Z"), 1709210096.0);
  // calendar.timegm((2024, 3, 1, 0, 0, 0)) == 1709251200
  EXPECT_EQ(Parsed("2024-03-01T00:00:00Z"), 1709251200.0);
  // 2000 was a leap year (divisible by 400): 2000-02-29 exists.
  // calendar.timegm((2000, 2, 29, 0, 0, 0)) == 951782400
  EXPECT_EQ(Parsed("2000-02-29T00:00:00Z"), 951782400.0);
  // No 29 February in 2026 or 2100, no 30 February ever, no 31 April.
  EXPECT_TRUE(Rejects("2026-02-29T00:00:00Z"));
  EXPECT_TRUE(Rejects("2100-02-29T00:00:00Z"));
  EXPECT_TRUE(Rejects("2024-02-30T00:00:00Z"));
  EXPECT_TRUE(Rejects("2026-04-31T00:00:00Z"));
}

TEST(ParseTime, FractionalSeconds) {
  EXPECT_DOUBLE_EQ(Parsed("2026-03-14T06:00:00.250Z"), 1773468000.25);
  EXPECT_DOUBLE_EQ(Parsed("2026-03-14T06:00:00.5Z"), 1773468000.5);
  EXPECT_NEAR(Parsed("2026-03-14T06:00:01.123456Z"), 1773468001.123456, 1e-6);
  // A comma is ISO 8601's other decimal sign.
  EXPECT_DOUBLE_EQ(Parsed("2026-03-14T06:00:00,75Z"), 1773468000.75);
  EXPECT_TRUE(Rejects("2026-03-14T06:00:00.Z"));  // a decimal sign needs digits
}

TEST(ParseTime, Offsets) {
  // 08:00 at +02:00 is 06:00 UTC: 1773468000.
  EXPECT_EQ(Parsed("2026-03-14T08:00:00+02:00"), 1773468000.0);
  EXPECT_EQ(Parsed("2026-03-14T08:00:00+0200"), 1773468000.0);
  EXPECT_EQ(Parsed("2026-03-14T08:00:00+02"), 1773468000.0);
  EXPECT_DOUBLE_EQ(Parsed("2026-03-14T08:00:00.500+02:00"), 1773468000.5);
  // 00:30 at +02:00 is the previous day, 22:30 UTC:
  // calendar.timegm((2026, 3, 13, 22, 30, 0)) == 1773441000
  EXPECT_EQ(Parsed("2026-03-14T00:30:00+02:00"), 1773441000.0);
  // 01:00 at -05:00 is 06:00 UTC.
  EXPECT_EQ(Parsed("2026-03-14T01:00:00-05:00"), 1773468000.0);
  // 11:45 at +05:45 is 06:00 UTC.
  EXPECT_EQ(Parsed("2026-03-14T11:45:00+05:45"), 1773468000.0);
  EXPECT_TRUE(Rejects("2026-03-14T08:00:00+2:00"));
  EXPECT_TRUE(Rejects("2026-03-14T08:00:00+02:"));
  EXPECT_TRUE(Rejects("2026-03-14T08:00:00+02:60"));
  EXPECT_TRUE(Rejects("2026-03-14T08:00:00+24:00"));
  EXPECT_TRUE(Rejects("2026-03-14T08:00:00+02:00x"));
}

TEST(ParseTime, EpochNumbers) {
  EXPECT_EQ(Parsed("1773468000"), 1773468000.0);
  EXPECT_DOUBLE_EQ(Parsed("1773468000.5"), 1773468000.5);
  EXPECT_EQ(Parsed("+1773468000"), 1773468000.0);
  EXPECT_EQ(Parsed("0"), 0.0);
  EXPECT_EQ(Parsed("-1.5"), -1.5);
  EXPECT_EQ(Parsed("1.7e9"), 1.7e9);
  EXPECT_TRUE(Rejects("nan"));
  EXPECT_TRUE(Rejects("inf"));
  EXPECT_TRUE(Rejects("1773468000s"));
  EXPECT_TRUE(Rejects("+-5"));
  EXPECT_TRUE(Rejects("+"));
  EXPECT_TRUE(Rejects(""));
  EXPECT_TRUE(Rejects("   "));
}

TEST(ParseTime, RejectsMalformed) {
  EXPECT_TRUE(Rejects("2026-03-14T06:00:00"));    // no zone: UTC must be explicit
  EXPECT_TRUE(Rejects("2026-03-14T06:00:00.5"));  // no zone, with a fraction
  EXPECT_TRUE(Rejects("2026-13-14T06:00:00Z"));   // month 13
  EXPECT_TRUE(Rejects("2026-00-14T06:00:00Z"));   // month 0
  EXPECT_TRUE(Rejects("2026-03-00T06:00:00Z"));   // day 0
  EXPECT_TRUE(Rejects("2026-03-32T06:00:00Z"));
  EXPECT_TRUE(Rejects("2026-03-14T24:00:00Z"));
  EXPECT_TRUE(Rejects("2026-03-14T06:60:00Z"));
  EXPECT_TRUE(Rejects("2026-03-14T06:00:61Z"));
  EXPECT_TRUE(Rejects("2026-03-14T6:00:00Z"));
  EXPECT_TRUE(Rejects("2026-3-14T06:00:00Z"));
  EXPECT_TRUE(Rejects("2026/03/14T06:00:00Z"));
  EXPECT_TRUE(Rejects("2026-03-14T06:00Z"));
  EXPECT_TRUE(Rejects("2026-03-14"));
  EXPECT_TRUE(Rejects("2026-03-14T"));
  EXPECT_TRUE(Rejects("2026-03-14Tab:cd:efZ"));
  EXPECT_TRUE(Rejects("2026-03-14T06:00:00Q"));
  EXPECT_TRUE(Rejects("2026-03-14T06:00:00ZZ"));
}

TEST(FormatIsoUtc, KnownValues) {
  EXPECT_EQ(FormatIsoUtc(0.0), "1970-01-01T00:00:00.000Z");
  EXPECT_EQ(FormatIsoUtc(1773468000.0), "2026-03-14T06:00:00.000Z");
  EXPECT_EQ(FormatIsoUtc(1773468000.25, 3), "2026-03-14T06:00:00.250Z");
  EXPECT_EQ(FormatIsoUtc(1773468000.25, 0), "2026-03-14T06:00:00Z");
  EXPECT_EQ(FormatIsoUtc(1709210096.0, 1), "2024-02-29T12:34:56.0Z");
  EXPECT_EQ(FormatIsoUtc(946684799.9996, 3), "2000-01-01T00:00:00.000Z");  // rounds up a day
  EXPECT_EQ(FormatIsoUtc(-1.0, 0), "1969-12-31T23:59:59Z");
  EXPECT_EQ(FormatIsoUtc(1773468000.123456, 6), "2026-03-14T06:00:00.123456Z");
  EXPECT_EQ(FormatIsoUtc(1773468000.5, 9), "2026-03-14T06:00:00.500000Z");  // clamped to 6
}

TEST(FormatIsoUtc, RoundTripsThroughParseTime) {
  // Every day boundary of a leap year and its neighbours, and odd times.
  for (double t = 1704067200.0 - 86400.0; t < 1735689600.0 + 86400.0; t += 86400.0 * 0.9137) {
    const double ms = std::round(t * 1000.0) / 1000.0;
    const std::string s = FormatIsoUtc(ms, 3);
    double back = 0.0;
    ASSERT_TRUE(ParseTime(s, &back)) << s;
    EXPECT_NEAR(back, ms, 1e-6) << s;
    EXPECT_EQ(FormatIsoUtc(back, 3), s);
  }
  for (double t : {0.0, 951782400.0, 1709210096.0, 4107542400.0, 1773468000.001}) {
    const std::string s = FormatIsoUtc(t, 3);
    double back = 0.0;
    ASSERT_TRUE(ParseTime(s, &back)) << s;
    EXPECT_NEAR(back, t, 1e-6) << s;
  }
}

TEST(ParseQuality, Names) {
  Quality q = Quality::kBad;
  EXPECT_TRUE(ParseQuality("", &q));
  EXPECT_EQ(q, Quality::kGood);
  EXPECT_TRUE(ParseQuality("uncertain", &q));
  EXPECT_EQ(q, Quality::kUncertain);
  EXPECT_TRUE(ParseQuality(" bad\r", &q));
  EXPECT_EQ(q, Quality::kBad);
  EXPECT_TRUE(ParseQuality("good", &q));
  EXPECT_EQ(q, Quality::kGood);
  EXPECT_FALSE(ParseQuality("GOOD", &q));
  EXPECT_FALSE(ParseQuality("ok", &q));
}

// ---------------------------------------------------------------------------
// The reader.
// ---------------------------------------------------------------------------

Site ReaderSite() {
  Site site;
  site.name = "reader test";
  for (const char* id : {"FT-1", "PT-1", "TT-1"}) {
    PointSpec p;
    p.id = id;
    site.points.push_back(p);
  }
  return site;
}

// A file in the temporary directory, removed when the test ends.
class TempFile {
 public:
  explicit TempFile(const std::string& contents) {
    const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
    path_ = (std::filesystem::temp_directory_path() /
             ("holdfast_readings_" + std::string(info->test_suite_name()) + "_" + info->name() + "_" +
              std::to_string(counter_++) + ".csv"))
                .string();
    std::ofstream f(path_, std::ios::binary);
    f << contents;
  }
  ~TempFile() { std::remove(path_.c_str()); }
  const std::string& path() const { return path_; }

 private:
  static int counter_;
  std::string path_;
};
int TempFile::counter_ = 0;

struct ReadAll {
  std::vector<Reading> readings;
  uint64_t rows = 0, bad = 0;
  std::vector<CsvRowError> errors;
};

ReadAll Read(const std::string& contents, const Site& site) {
  TempFile file(contents);
  ReadingsCsvReader reader;
  std::string why;
  ReadAll out;
  EXPECT_TRUE(reader.Open(file.path(), site, &why)) << why;
  Reading r;
  while (reader.Next(&r)) out.readings.push_back(r);
  out.rows = reader.rows();
  out.bad = reader.bad_rows();
  out.errors = reader.errors();
  return out;
}

TEST(ReadingsCsvReader, ReadsGoodRows) {
  const Site site = ReaderSite();
  const ReadAll a = Read(
      "time,point,value,quality\n"
      "2026-03-14T06:00:00.000Z,FT-1,901.25,good\n"
      "2026-03-14T06:00:00.500Z,PT-1,48.123,uncertain\n"
      "2026-03-14T06:00:01.000Z,TT-1,-3.5,bad\n"
      "1773468002,FT-1,1e3,\n"
      "2026-03-14T08:00:03+02:00, PT-1 , +47.5 , good \n",
      site);
  ASSERT_EQ(a.readings.size(), 5u);
  EXPECT_EQ(a.bad, 0u);
  EXPECT_EQ(a.rows, 5u);
  EXPECT_EQ(a.readings[0].point, 0);
  EXPECT_EQ(a.readings[0].time_s, 1773468000.0);
  EXPECT_EQ(a.readings[0].value, 901.25);
  EXPECT_EQ(a.readings[0].quality, Quality::kGood);
  EXPECT_EQ(a.readings[1].point, 1);
  EXPECT_EQ(a.readings[1].time_s, 1773468000.5);
  EXPECT_EQ(a.readings[1].value, 48.123);
  EXPECT_EQ(a.readings[1].quality, Quality::kUncertain);
  EXPECT_EQ(a.readings[2].point, 2);
  EXPECT_EQ(a.readings[2].value, -3.5);
  EXPECT_EQ(a.readings[2].quality, Quality::kBad);
  EXPECT_EQ(a.readings[3].time_s, 1773468002.0);
  EXPECT_EQ(a.readings[3].value, 1000.0);
  EXPECT_EQ(a.readings[3].quality, Quality::kGood);  // empty quality = good
  EXPECT_EQ(a.readings[4].point, 1);
  EXPECT_EQ(a.readings[4].time_s, 1773468003.0);
  EXPECT_EQ(a.readings[4].value, 47.5);
}

TEST(ReadingsCsvReader, DateCacheFollowsDateChanges) {
  // Rows across midnight and back: the per-date cache must not keep a stale day.
  const Site site = ReaderSite();
  const ReadAll a = Read(
      "time,point,value,quality\n"
      "2024-02-28T23:59:59.000Z,FT-1,1,good\n"
      "2024-02-29T00:00:00.000Z,FT-1,2,good\n"
      "2024-02-29T12:34:56.000Z,FT-1,3,good\n"
      "2024-03-01T00:00:00.000Z,FT-1,4,good\n"
      "2024-02-29T12:34:56.500Z,FT-1,5,good\n"
      "2024-02-29T12:34:57.000+01:00,FT-1,6,good\n",
      site);
  ASSERT_EQ(a.readings.size(), 6u);
  // calendar.timegm((2024, 2, 29, 0, 0, 0)) == 1709164800
  EXPECT_EQ(a.readings[0].time_s, 1709164799.0);
  EXPECT_EQ(a.readings[1].time_s, 1709164800.0);
  EXPECT_EQ(a.readings[2].time_s, 1709210096.0);
  EXPECT_EQ(a.readings[3].time_s, 1709251200.0);
  EXPECT_EQ(a.readings[4].time_s, 1709210096.5);
  EXPECT_EQ(a.readings[5].time_s, 1709210097.0 - 3600.0);
}

TEST(ReadingsCsvReader, QualityColumnIsOptional) {
  const Site site = ReaderSite();
  const ReadAll a = Read(
      "time,point,value\n"
      "2026-03-14T06:00:00Z,FT-1,900\n"
      "2026-03-14T06:00:02Z,FT-1,901,bad\n",
      site);
  ASSERT_EQ(a.readings.size(), 2u);
  EXPECT_EQ(a.readings[0].quality, Quality::kGood);
  EXPECT_EQ(a.readings[1].quality, Quality::kBad);
  EXPECT_EQ(a.bad, 0u);
}

TEST(ReadingsCsvReader, WrongHeaderNamesTheFile) {
  const Site site = ReaderSite();
  TempFile file("timestamp,tag,value\n2026-03-14T06:00:00Z,FT-1,900\n");
  ReadingsCsvReader reader;
  std::string why;
  EXPECT_FALSE(reader.Open(file.path(), site, &why));
  EXPECT_NE(why.find(file.path()), std::string::npos) << why;
  EXPECT_NE(why.find(":1:"), std::string::npos) << why;  // the header's line
  EXPECT_NE(why.find("time,point,value,quality"), std::string::npos) << why;
}

TEST(ReadingsCsvReader, EmptyAndMissingFiles) {
  const Site site = ReaderSite();
  {
    TempFile file("# only a comment\n\n");
    ReadingsCsvReader reader;
    std::string why;
    EXPECT_FALSE(reader.Open(file.path(), site, &why));
    EXPECT_NE(why.find(file.path()), std::string::npos) << why;
    EXPECT_NE(why.find("empty"), std::string::npos) << why;
  }
  {
    const std::string path =
        (std::filesystem::temp_directory_path() / "holdfast_readings_no_such_file.csv").string();
    ReadingsCsvReader reader;
    std::string why;
    EXPECT_FALSE(reader.Open(path, site, &why));
    EXPECT_NE(why.find(path), std::string::npos) << why;
  }
}

TEST(ReadingsCsvReader, CommentsBlankLinesAndByteOrderMark) {
  const Site site = ReaderSite();
  const ReadAll a = Read(
      "# exported by a test\n"
      "\n"
      "\xEF\xBB\xBFtime,point,value,quality\n"
      "# a comment between rows\n"
      "\n"
      "   \n"
      "\t\n"
      "2026-03-14T06:00:00Z,FT-1,900,good\n"
      "#2026-03-14T06:00:01Z,FT-1,999,good\n"
      "2026-03-14T06:00:02Z,FT-1,901,good",  // no newline at the end
      site);
  ASSERT_EQ(a.readings.size(), 2u);
  EXPECT_EQ(a.readings[0].value, 900.0);
  EXPECT_EQ(a.readings[1].value, 901.0);
  EXPECT_EQ(a.rows, 2u);
  EXPECT_EQ(a.bad, 0u);
}

TEST(ReadingsCsvReader, CrlfLineEndings) {
  const Site site = ReaderSite();
  const ReadAll a = Read(
      "time,point,value,quality\r\n"
      "2026-03-14T06:00:00Z,FT-1,900,good\r\n"
      "\r\n"
      "2026-03-14T06:00:02Z,PT-1,48.5\r\n"
      "2026-03-14T06:00:04Z,TT-1,18.25,uncertain\r\n"
      "2026-03-14T06:00:06Z,XX-9,1,good\r\n",
      site);
  ASSERT_EQ(a.readings.size(), 3u);
  EXPECT_EQ(a.readings[1].value, 48.5);
  EXPECT_EQ(a.readings[1].quality, Quality::kGood);
  EXPECT_EQ(a.readings[2].quality, Quality::kUncertain);
  ASSERT_EQ(a.errors.size(), 1u);
  EXPECT_EQ(a.errors[0].line, 6u);
  EXPECT_NE(a.errors[0].message.find("XX-9"), std::string::npos);
  EXPECT_EQ(a.errors[0].message.find('\r'), std::string::npos);
}

TEST(ReadingsCsvReader, BadRowsAreCountedWithLineNumbers) {
  const Site site = ReaderSite();
  const ReadAll a = Read(
      "# header follows\n"                               // 1
      "time,point,value,quality\n"                       // 2
      "2026-03-14T06:00:00Z,FT-1,900,good\n"             // 3 good
      "2026-03-14T06:00:00Z,NOPE,900,good\n"             // 4 unknown point
      "2026-03-14T06:00:02Z,FT-1,n/a,good\n"             // 5 bad number
      "\n"                                               // 6 blank
      "2026-03-14T06:00:02Z,PT-1,48.1,fine\n"            // 7 bad quality
      "2026-03-14T06:00:04Z,PT-1\n"                      // 8 missing field
      "2026-03-14T06:00:04Z,PT-1,\n"                     // 9 empty value
      "2026-03-14T06:00:04,PT-1,48.2,good\n"             // 10 time without zone
      "2026-03-14T06:00:04Z,PT-1,48.2,good,extra\n"      // 11 too many fields
      "2026-03-14T06:00:04Z,PT-1,nan,good\n"             // 12 not finite
      "2026-03-14T06:00:04Z,PT-1,1e999,good\n"           // 13 out of range
      "2026-03-14T06:00:06Z,TT-1,18.2,good\n",           // 14 good
      site);
  ASSERT_EQ(a.readings.size(), 2u);
  EXPECT_EQ(a.readings[0].value, 900.0);
  EXPECT_EQ(a.readings[1].value, 18.2);
  EXPECT_EQ(a.rows, 11u);
  EXPECT_EQ(a.bad, 9u);
  ASSERT_EQ(a.errors.size(), 9u);
  const uint64_t lines[] = {4, 5, 7, 8, 9, 10, 11, 12, 13};
  for (size_t i = 0; i < 9; ++i) EXPECT_EQ(a.errors[i].line, lines[i]) << a.errors[i].message;
  EXPECT_NE(a.errors[0].message.find("unknown point 'NOPE'"), std::string::npos) << a.errors[0].message;
  EXPECT_NE(a.errors[1].message.find("bad value 'n/a'"), std::string::npos) << a.errors[1].message;
  EXPECT_NE(a.errors[2].message.find("bad quality 'fine'"), std::string::npos) << a.errors[2].message;
  EXPECT_NE(a.errors[3].message.find("expected"), std::string::npos) << a.errors[3].message;
  EXPECT_NE(a.errors[5].message.find("bad time"), std::string::npos) << a.errors[5].message;
  EXPECT_NE(a.errors[6].message.find("too many fields"), std::string::npos) << a.errors[6].message;
}

TEST(ReadingsCsvReader, KeepsTheFirstHundredErrorsAndCountsAll) {
  const Site site = ReaderSite();
  std::string text = "time,point,value,quality\n";
  for (int i = 0; i < 250; ++i) text += "2026-03-14T06:00:00Z,FT-1,x,good\n";
  text += "2026-03-14T06:00:00Z,FT-1,1,good\n";
  const ReadAll a = Read(text, site);
  EXPECT_EQ(a.readings.size(), 1u);
  EXPECT_EQ(a.bad, 250u);
  ASSERT_EQ(a.errors.size(), 100u);
  EXPECT_EQ(a.errors.front().line, 2u);
  EXPECT_EQ(a.errors.back().line, 101u);
}

// 100 000 rows of varying length make about 4 MB: several 1 MiB blocks, so
// many rows straddle a block boundary. Every row must come back intact.
TEST(ReadingsCsvReader, LargeFileAcrossBlockBoundaries) {
  const Site site = ReaderSite();
  const char* ids[] = {"FT-1", "PT-1", "TT-1"};
  std::string text = "time,point,value,quality\n";
  const int n = 100000;
  for (int i = 0; i < n; ++i) {
    const double t = 1773468000.0 + 0.25 * i;
    text += FormatIsoUtc(t, 3);
    text += ',';
    text += ids[i % 3];
    text += ',';
    text += std::to_string(i);
    text += (i % 7 == 0) ? ",uncertain" : (i % 5 == 0 ? "" : ",good");
    text += (i % 11 == 0) ? "\r\n" : "\n";
  }
  ASSERT_GT(text.size(), 3u * (1u << 20));
  TempFile file(text);
  ReadingsCsvReader reader;
  std::string why;
  ASSERT_TRUE(reader.Open(file.path(), site, &why)) << why;
  Reading r;
  int count = 0;
  bool all_right = true;
  while (reader.Next(&r)) {
    const bool ok = r.point == count % 3 && r.value == static_cast<double>(count) &&
                    std::fabs(r.time_s - (1773468000.0 + 0.25 * count)) < 1e-6 &&
                    r.quality == (count % 7 == 0 ? Quality::kUncertain : Quality::kGood);
    if (!ok && all_right) {
      ADD_FAILURE() << "row " << count << " (line " << reader.line() << ") came back as point " << r.point
                    << " value " << r.value << " time " << FormatIsoUtc(r.time_s, 3);
      all_right = false;
    }
    ++count;
  }
  EXPECT_EQ(count, n);
  EXPECT_EQ(reader.rows(), static_cast<uint64_t>(n));
  EXPECT_EQ(reader.bad_rows(), 0u);
  EXPECT_EQ(reader.line(), static_cast<uint64_t>(n + 1));
  EXPECT_EQ(reader.bytes_read(), text.size());
}

std::string LongGarbage(size_t n) {
  std::string s;
  s.reserve(n);
  for (size_t i = 0; i < n; ++i) s += static_cast<char>('a' + i % 26);
  return s;
}

TEST(ReadingsCsvReader, OverlongLineIsBadAndTheNextRowsSurvive) {
  const Site site = ReaderSite();
  // A long line that starts like a good row, so only its length is wrong.
  const std::string long_row = "2026-03-14T06:00:00Z,FT-1,900,good" + std::string(5000, ' ');
  const ReadAll a = Read(
      "time,point,value,quality\n"                  // 1
      "2026-03-14T06:00:00Z,FT-1,1,good\n"          // 2
      + long_row + "\n" +                           // 3 too long
      "2026-03-14T06:00:02Z,FT-1,2,good\n"          // 4
      + LongGarbage(20000) + "\n" +                 // 5 too long
      "2026-03-14T06:00:04Z,FT-1,3,good\n",         // 6
      site);
  ASSERT_EQ(a.readings.size(), 3u);
  EXPECT_EQ(a.readings[0].value, 1.0);
  EXPECT_EQ(a.readings[1].value, 2.0);
  EXPECT_EQ(a.readings[2].value, 3.0);
  EXPECT_EQ(a.bad, 2u);
  EXPECT_EQ(a.rows, 5u);
  ASSERT_EQ(a.errors.size(), 2u);
  EXPECT_EQ(a.errors[0].line, 3u);
  EXPECT_EQ(a.errors[1].line, 5u);
  EXPECT_NE(a.errors[0].message.find("longer than 4096"), std::string::npos) << a.errors[0].message;
}

TEST(ReadingsCsvReader, OverlongLineAcrossABlockBoundary) {
  // Put a long line so that it starts shortly before the 1 MiB mark: its end
  // is not in the first block, which takes the skipping path.
  const Site site = ReaderSite();
  std::string text = "time,point,value,quality\n";
  const std::string row = "2026-03-14T06:00:00Z,FT-1,7,good\n";
  uint64_t lines = 1;
  while (text.size() + row.size() < (1u << 20) - 1000) {
    text += row;
    ++lines;
  }
  const uint64_t good_before = lines - 1;
  text += LongGarbage(3u << 20);  // 3 MiB without a newline: spans several blocks
  text += "\n";
  const uint64_t long_line = ++lines;
  text += "2026-03-14T06:00:02Z,FT-1,8,good\n";
  text += LongGarbage(6000);      // a long last line without a newline
  const uint64_t last_line = lines + 2;
  const ReadAll a = Read(text, site);
  ASSERT_EQ(a.readings.size(), good_before + 1);
  EXPECT_EQ(a.readings.back().value, 8.0);
  EXPECT_EQ(a.bad, 2u);
  ASSERT_EQ(a.errors.size(), 2u);
  EXPECT_EQ(a.errors[0].line, long_line);
  EXPECT_EQ(a.errors[1].line, last_line);
}

TEST(ReadingsCsvReader, LineOfExactlyTheLimitIsNotTooLong) {
  const Site site = ReaderSite();
  std::string row = "2026-03-14T06:00:00Z,FT-1,5,good";
  row += std::string(4096 - row.size(), ' ');
  ASSERT_EQ(row.size(), 4096u);
  const ReadAll a = Read("time,point,value,quality\n" + row + "\r\n" + row + "\n", site);
  EXPECT_EQ(a.readings.size(), 2u);
  EXPECT_EQ(a.bad, 0u);
}

TEST(ReadingsCsvReader, CanBeReopened) {
  const Site site = ReaderSite();
  TempFile first("time,point,value,quality\n2026-03-14T06:00:00Z,FT-1,x,good\n2026-03-14T06:00:00Z,FT-1,1,good\n");
  TempFile second("time,point,value,quality\n2026-03-15T06:00:00Z,PT-1,2,good\n");
  ReadingsCsvReader reader;
  std::string why;
  Reading r;
  ASSERT_TRUE(reader.Open(first.path(), site, &why)) << why;
  ASSERT_TRUE(reader.Next(&r));
  EXPECT_EQ(reader.bad_rows(), 1u);
  ASSERT_TRUE(reader.Open(second.path(), site, &why)) << why;
  ASSERT_TRUE(reader.Next(&r));
  EXPECT_EQ(r.point, 1);
  EXPECT_EQ(r.time_s, 1773468000.0 + 86400.0);
  EXPECT_EQ(reader.line(), 2u);
  EXPECT_EQ(reader.bad_rows(), 0u);
  EXPECT_FALSE(reader.Next(&r));
}

// The demo readings (tools/make-demo-readings.py) carry deliberate blemishes;
// the reader and the aligner must count them and carry on.
TEST(DemoReadings, BlemishesAreCounted) {
  const std::string path = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-readings.csv";
  if (!std::filesystem::exists(path)) GTEST_SKIP() << "no " << path;
  Site site;
  for (const char* id : {"CF-FT-101", "CF-PT-101", "CF-TT-101", "TJ-FT-201", "TJ-PT-201", "MB-PT-301",
                         "MB-TT-301", "MB-TT-302", "MB-LT-301", "MB-FT-302"}) {
    PointSpec p;
    p.id = id;
    site.points.push_back(p);
  }
  ReadingsCsvReader reader;
  std::string why;
  ASSERT_TRUE(reader.Open(path, site, &why)) << why;
  Aligner aligner;
  aligner.Reset(site);
  Reading r;
  while (reader.Next(&r)) aligner.Feed(r);
  EXPECT_EQ(reader.bad_rows(), 1u);  // the row whose value is 'n/a'
  ASSERT_EQ(reader.errors().size(), 1u);
  EXPECT_NE(reader.errors()[0].message.find("n/a"), std::string::npos);
  EXPECT_EQ(aligner.counters().duplicate, 10u);
  EXPECT_EQ(aligner.counters().out_of_order, 3u);
  EXPECT_EQ(aligner.counters().bad_quality, 1u);
  EXPECT_EQ(aligner.counters().unknown_point, 0u);
  EXPECT_EQ(aligner.counters().not_finite, 0u);
  EXPECT_GT(aligner.counters().accepted, 40000u);
}

}  // namespace
}  // namespace holdfast
