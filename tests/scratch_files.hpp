#pragma once
// Helpers shared by the tests that write files: a fresh scratch folder and whole-file reads.
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>

namespace trapwork_test {

// An empty folder TRAPWORK_BINARY_DIR/<area>/<name>, removed and re-created each call.
inline std::filesystem::path scratch_dir(const std::string& area, const std::string& name) {
  const auto dir = std::filesystem::path(TRAPWORK_BINARY_DIR) / area / name;
  std::filesystem::remove_all(dir);
  std::filesystem::create_directories(dir);
  return dir;
}

inline std::string read_all(const std::filesystem::path& p) {
  std::ifstream in(p);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

}  // namespace trapwork_test
