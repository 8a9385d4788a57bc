// The readings file: CSV with the header `time,point,value,quality`.
//   time     ISO 8601 UTC ("2026-03-14T06:00:00Z", fractional seconds and a
//            "+hh:mm" offset allowed) or epoch seconds ("1773468000.5")
//   point    a point id from the site config
//   value    a number in the unit the point declares
//   quality  optional: good, uncertain or bad (empty = good)
// Lines starting with '#' and blank lines are skipped. A bad row is counted,
// its line number and reason kept (the first 100), and reading continues.
// The file is streamed in fixed-size blocks: memory does not grow with it.
#pragma once

#include <cstdint>
#include <cstdio>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "holdfast/reading.h"
#include "holdfast/site.h"

namespace holdfast {

// Parses ISO 8601 UTC or epoch seconds. Returns false when malformed.
bool ParseTime(std::string_view text, double* epoch_s);
// "2026-03-14T06:00:00.250Z" with `decimals` fractional digits (0..6).
std::string FormatIsoUtc(double epoch_s, int decimals = 3);
bool ParseQuality(std::string_view text, Quality* q);

struct CsvRowError {
  uint64_t line = 0;
  std::string message;
};

class ReadingsCsvReader {
 public:
  ReadingsCsvReader() = default;
  ~ReadingsCsvReader();
  ReadingsCsvReader(const ReadingsCsvReader&) = delete;
  ReadingsCsvReader& operator=(const ReadingsCsvReader&) = delete;

  // Opens the file ("-" = standard input) and checks the header.
  bool Open(const std::string& path, const Site& site, std::string* why);
  // The next good reading; false at the end of the file.
  bool Next(Reading* r);

  uint64_t line() const { return line_; }
  uint64_t rows() const { return rows_; }
  uint64_t bad_rows() const { return bad_rows_; }
  const std::vector<CsvRowError>& errors() const { return errors_; }
  const std::string& path() const { return path_; }
  uint64_t bytes_read() const { return bytes_read_; }

 private:
  bool NextLine(std::string_view* line);
  bool ParseRow(std::string_view line, Reading* r, std::string* why);
  void Bad(const std::string& why);

  std::FILE* file_ = nullptr;
  bool owns_file_ = false;
  std::string path_;
  std::vector<char> buf_;
  size_t begin_ = 0, end_ = 0;
  bool eof_ = false;
  uint64_t line_ = 0, rows_ = 0, bad_rows_ = 0, bytes_read_ = 0;
  std::vector<CsvRowError> errors_;
  std::unordered_map<std::string, int> points_;
  std::string key_;
  std::string last_id_;
  int last_index_ = -1;
  // Date cache: the "YYYY-MM-DD" of the previous row and its epoch day.
  char last_date_[10] = {0};
  int64_t last_day_ = 0;
  bool have_date_ = false;
};

}  // namespace holdfast
