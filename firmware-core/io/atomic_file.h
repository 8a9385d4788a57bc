// Durable whole-file writes for state that must survive power cuts: the
// content goes to PATH.tmp, is fsync'ed, renamed over PATH, and the directory
// is fsync'ed, so a reader sees either the old file or the new one, whole.
#pragma once

#include <string>

namespace holdfast {

bool WriteFileAtomic(const std::string& path, const std::string& content, std::string* why);
// Reads a whole file; false with the reason (naming the file) if it cannot.
bool ReadWholeFile(const std::string& path, std::string* content, std::string* why);

}  // namespace holdfast
