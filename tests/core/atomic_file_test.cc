// Durable state files: atomic replace, no temporary left behind, clear errors.
#include "atomic_file.h"

#include <unistd.h>

#include <cstdio>
#include <filesystem>
#include <string>

#include <gtest/gtest.h>

namespace holdfast {
namespace {

std::string TempDir() {
  const auto dir = std::filesystem::temp_directory_path() /
                   ("holdfast-atomic-" + std::to_string(::getpid()));
  std::filesystem::create_directories(dir);
  return dir.string();
}

TEST(AtomicFile, WritesReplacesAndReadsBack) {
  const std::string path = TempDir() + "/state.json";
  std::string why, back;
  ASSERT_TRUE(WriteFileAtomic(path, "first", &why)) << why;
  ASSERT_TRUE(WriteFileAtomic(path, "second, longer", &why)) << why;
  ASSERT_TRUE(ReadWholeFile(path, &back, &why)) << why;
  EXPECT_EQ(back, "second, longer");
  EXPECT_FALSE(std::filesystem::exists(path + ".tmp"));
}

TEST(AtomicFile, ErrorsNameTheFile) {
  std::string why, back;
  EXPECT_FALSE(WriteFileAtomic("/nonexistent-dir/x/state.json", "x", &why));
  EXPECT_NE(why.find("/nonexistent-dir/x/state.json"), std::string::npos);
  EXPECT_FALSE(ReadWholeFile("/nonexistent-dir/x/state.json", &back, &why));
  EXPECT_NE(why.find("cannot open"), std::string::npos);
}

}  // namespace
}  // namespace holdfast
