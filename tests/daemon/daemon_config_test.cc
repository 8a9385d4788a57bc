// The daemon's config file: bad input is named by file, line and column or by
// field (LoadDaemonConfig, daemon_config.h).
#include "daemon_config.h"

#include <cstdio>
#include <filesystem>
#include <string>

#include <gtest/gtest.h>

namespace holdfast::daemon {
namespace {

std::string WriteTemp(const std::string& name, const std::string& text) {
  const std::filesystem::path p = std::filesystem::temp_directory_path() / name;
  std::FILE* f = std::fopen(p.c_str(), "wb");
  EXPECT_NE(f, nullptr);
  std::fputs(text.c_str(), f);
  std::fclose(f);
  return p.string();
}

TEST(DaemonConfig, ParseErrorNamesLineAndColumn) {
  const std::string path = WriteTemp("holdfast-daemon-config-test-1.json",
                                     "{\n  \"format\": \"holdfast-daemon/1\",\n  \"site_file\": x\n}\n");
  DaemonOptions o;
  std::string why;
  EXPECT_FALSE(LoadDaemonConfig(path, &o, &why));
  EXPECT_NE(why.find(path + ":3:"), std::string::npos) << why;
  EXPECT_NE(why.find("parse error"), std::string::npos) << why;
  std::filesystem::remove(path);
}

TEST(DaemonConfig, RepeatedKeyIsNamedByItsPointer) {
  const std::string path = WriteTemp("holdfast-daemon-config-test-2.json",
                                     "{\"format\": \"holdfast-daemon/1\", \"site_file\": \"a.json\", "
                                     "\"site_file\": \"b.json\"}\n");
  DaemonOptions o;
  std::string why;
  EXPECT_FALSE(LoadDaemonConfig(path, &o, &why));
  EXPECT_NE(why.find(path + ":/site_file"), std::string::npos) << why;
  EXPECT_NE(why.find("duplicate key"), std::string::npos) << why;
  std::filesystem::remove(path);
}

TEST(DaemonConfig, NotAnObject) {
  const std::string path = WriteTemp("holdfast-daemon-config-test-3.json", "[1, 2]\n");
  DaemonOptions o;
  std::string why;
  EXPECT_FALSE(LoadDaemonConfig(path, &o, &why));
  EXPECT_EQ(why, path + ": not a JSON object");
  std::filesystem::remove(path);
}

}  // namespace
}  // namespace holdfast::daemon
