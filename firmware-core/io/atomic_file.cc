#include "atomic_file.h"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <fstream>
#include <sstream>

namespace holdfast {

bool WriteFileAtomic(const std::string& path, const std::string& content, std::string* why) {
  auto fail = [&](const std::string& m) {
    if (why) *why = path + ": " + m;
    return false;
  };
  const std::string tmp = path + ".tmp";
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0640);
  if (fd < 0) return fail("cannot create " + tmp + ": " + std::strerror(errno));
  size_t done = 0;
  while (done < content.size()) {
    const ssize_t n = ::write(fd, content.data() + done, content.size() - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      const int err = errno;
      ::close(fd);
      ::unlink(tmp.c_str());
      return fail("cannot write " + tmp + ": " + std::strerror(err));
    }
    done += static_cast<size_t>(n);
  }
  if (::fsync(fd) != 0) {
    const int err = errno;
    ::close(fd);
    ::unlink(tmp.c_str());
    return fail("cannot fsync " + tmp + ": " + std::strerror(err));
  }
  if (::close(fd) != 0) return fail("cannot close " + tmp + ": " + std::strerror(errno));
  if (::rename(tmp.c_str(), path.c_str()) != 0) {
    const int err = errno;
    ::unlink(tmp.c_str());
    return fail("cannot rename " + tmp + ": " + std::strerror(err));
  }
  // The rename is durable only once the directory entry is on disk.
  const size_t slash = path.find_last_of('/');
  const std::string dir = slash == std::string::npos ? "." : (slash == 0 ? "/" : path.substr(0, slash));
  const int dfd = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dfd < 0) return fail("written, but cannot open the directory " + dir + " to sync it: " + std::strerror(errno));
  const int rc = ::fsync(dfd);
  const int err = errno;
  ::close(dfd);
  // Some file systems cannot sync a directory (EINVAL); the rename stands.
  if (rc != 0 && err != EINVAL) return fail("written, but cannot sync the directory " + dir + ": " + std::strerror(err));
  return true;
}

bool ReadWholeFile(const std::string& path, std::string* content, std::string* why) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    if (why) *why = path + ": cannot open: " + std::strerror(errno);
    return false;
  }
  std::ostringstream ss;
  ss << in.rdbuf();
  if (in.bad()) {
    if (why) *why = path + ": read error";
    return false;
  }
  *content = ss.str();
  return true;
}

}  // namespace holdfast
