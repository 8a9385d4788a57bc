// MQTT credentials files, shared by holdfastd and `holdfast alarms` (the
// protocol library: topics.h, command.h and this file).
#pragma once

#include <string>

namespace holdfast::daemon {

struct Credentials {
  std::string user;
  std::string password;  // never logged
};

// Reads a credentials file: line 1 the user name, line 2 the password.
// Refuses (false, with the reason, never the content) a file that is not a
// regular file, that is not owned by the user running the program, or that
// group or others can read, write or execute.
bool ReadCredentialsFile(const std::string& path, Credentials* out, std::string* why);

}  // namespace holdfast::daemon
