#include "credentials.h"

#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <fstream>

namespace holdfast::daemon {

bool ReadCredentialsFile(const std::string& path, Credentials* out, std::string* why) {
  struct stat st {};
  if (::stat(path.c_str(), &st) != 0) {
    if (why) *why = path + ": cannot read the credentials file: " + std::strerror(errno);
    return false;
  }
  if (!S_ISREG(st.st_mode)) {
    if (why) *why = path + ": the credentials file is not a regular file";
    return false;
  }
  if (st.st_uid != ::geteuid()) {
    if (why)
      *why = path + ": the credentials file is owned by uid " + std::to_string(st.st_uid) +
             ", not by the user running this program (uid " + std::to_string(::geteuid()) +
             "); chown it to that user";
    return false;
  }
  if ((st.st_mode & 077) != 0) {
    char mode[8];
    std::snprintf(mode, sizeof mode, "%03o", static_cast<unsigned>(st.st_mode & 0777));
    if (why)
      *why = path + ": the credentials file is accessible to group or others (mode " + mode +
             "); run chmod 600 (or 400) on it";
    return false;
  }
  std::ifstream in(path);
  if (!in) {
    if (why) *why = path + ": cannot open the credentials file: " + std::strerror(errno);
    return false;
  }
  Credentials c;
  std::getline(in, c.user);
  std::getline(in, c.password);
  auto strip = [](std::string* s) {
    while (!s->empty() && (s->back() == '\r' || s->back() == ' ' || s->back() == '\t')) s->pop_back();
  };
  strip(&c.user);
  strip(&c.password);
  if (c.user.empty() || c.password.empty()) {
    if (why) *why = path + ": the credentials file must hold the user name on line 1 and the password on line 2";
    return false;
  }
  *out = std::move(c);
  return true;
}

}  // namespace holdfast::daemon
