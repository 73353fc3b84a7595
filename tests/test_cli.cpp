// The `trapwork` command: runs every example, checks its files and its exit codes.
#include <sys/wait.h>

#include <catch2/catch.hpp>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

using Catch::Contains;
namespace fs = std::filesystem;

namespace {
const fs::path binary = fs::path(TRAPWORK_BINARY_DIR) / "trapwork";
const fs::path examples = fs::path(TRAPWORK_SOURCE_DIR) / "examples";

fs::path scratch_dir(const std::string& name) {
  const fs::path dir = fs::path(TRAPWORK_BINARY_DIR) / "test-cli" / name;
  fs::remove_all(dir);
  fs::create_directories(dir);
  return dir;
}

std::string read_all(const fs::path& p) {
  std::ifstream in(p);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

struct Run {
  int exit_code;
  std::string out, err;
};

// Runs trapwork with `arguments` (shell words) from `dir`, capturing stdout and stderr.
Run run(const std::string& arguments, const fs::path& dir) {
  const std::string command =
      "cd '" + dir.string() + "' && '" + binary.string() + "' " + arguments + " > stdout.txt 2> stderr.txt";
  const int status = std::system(command.c_str());
  REQUIRE(WIFEXITED(status));
  return {WEXITSTATUS(status), read_all(dir / "stdout.txt"), read_all(dir / "stderr.txt")};
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> lines;
  std::istringstream in(text);
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  return lines;
}

std::size_t fields(const std::string& line) {
  return 1 + std::count(line.begin(), line.end(), ',');
}

// A CSV written by trapwork: names on line 1, then '#' comments, then rows of as many fields.
// Returns the number of rows.
std::size_t check_csv(const fs::path& file, const std::string& first_column) {
  INFO(file.string());
  const auto lines = lines_of(read_all(file));
  REQUIRE(lines.size() > 1);
  CHECK(lines[0].rfind(first_column + ",", 0) == 0);
  std::size_t i = 1;
  while (i < lines.size() && lines[i].rfind("# ", 0) == 0) ++i;
  CHECK(i > 1);  // the units are stated in comment lines
  for (std::size_t j = i; j < lines.size(); ++j) {
    CHECK(fields(lines[j]) == fields(lines[0]));
    CHECK(lines[j].find('#') == std::string::npos);
  }
  return lines.size() - i;
}

// Checks the three files of a spectrum run and returns the summary.
nlohmann::json check_outputs(const fs::path& folder) {
  for (const auto& entry : fs::directory_iterator(folder))
    CHECK(entry.path().filename().string().find(".tmp-") == std::string::npos);
  REQUIRE(fs::exists(folder / "summary.json"));
  const auto summary = nlohmann::json::parse(read_all(folder / "summary.json"));
  const std::size_t levels = summary.at("levels").size();
  CHECK(levels == summary.at("levels_requested").get<std::size_t>());
  CHECK(check_csv(folder / "spectrum.csv", "level") == levels);
  const std::size_t points = summary.at("grid").at("points").get<std::size_t>();
  CHECK(check_csv(folder / "states.csv", "x_um") == points);
  CHECK(fields(lines_of(read_all(folder / "states.csv"))[0]) == 1 + levels);
  return summary;
}
}  // namespace

TEST_CASE("trapwork spectrum runs every example and writes complete files", "[cli][examples]") {
  int count = 0;
  for (const auto& entry : fs::directory_iterator(examples)) {
    if (entry.path().extension() != ".toml") continue;
    const std::string name = entry.path().stem().string();
    INFO(name);
    const fs::path dir = scratch_dir(name);
    const Run r = run("spectrum '" + entry.path().string() + "' -o out --quiet", dir);
    CHECK(r.exit_code == 0);
    CHECK(r.err.empty());
    CHECK(r.out.empty());  // --quiet
    const auto summary = check_outputs(dir / "out");
    CHECK(summary.at("scenario").at("file") == entry.path().string());
    ++count;
  }
  CHECK(count >= 5);
}

TEST_CASE("the built-in scenario, the report and the overrides", "[cli]") {
  const fs::path dir = scratch_dir("default");
  const Run r = run("spectrum --levels 6", dir);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("trapwork spectrum: default") && Contains("spacing") && Contains("h*kHz") &&
                        Contains("wrote default-output"));
  const auto summary = check_outputs(dir / "default-output");  // the default folder
  CHECK(summary.at("levels").size() == 6);
  CHECK(summary.at("units").at("energy") == "h*kHz");
  CHECK(run("spectrum default -o elsewhere --quiet", dir).exit_code == 0);
  CHECK(fs::exists(dir / "elsewhere" / "summary.json"));
}

TEST_CASE("a bad scenario exits with 2 and names file, line and key", "[cli]") {
  const fs::path dir = scratch_dir("bad");
  {
    std::ofstream toml(dir / "bad.toml");
    toml << "[particle]\nmass = \"40 u\"\n[[potential]]\nshape = \"harmonic\"\nfrequncy = \"1 MHz\"\n";
  }
  const Run r = run("spectrum bad.toml -o out", dir);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Contains("trapwork: error: bad.toml:5:1: potential[1].frequncy") &&
                        Contains("did you mean 'frequency'?"));
  CHECK_FALSE(fs::exists(dir / "out"));  // nothing written

  const Run missing = run("spectrum no_such_file.toml", dir);
  CHECK(missing.exit_code == 2);
  CHECK_THAT(missing.err, Contains("trapwork: error: no_such_file.toml") && Contains("cannot open"));

  // Valid input that the physics cannot use (more levels than grid points): PhysicsError.
  {
    std::ofstream toml(dir / "small.toml");
    toml << "[particle]\nmass = \"40 u\"\n[[potential]]\nshape = \"harmonic\"\nfrequency = \"1 MHz\"\n"
            "[spectrum]\nlevels = 20\n[grid]\npoints = 8\nleft = \"-0.1 um\"\nright = \"0.1 um\"\n";
  }
  const Run physics = run("spectrum small.toml -o small-out", dir);
  CHECK(physics.exit_code == 2);
  CHECK_THAT(physics.err, Contains("trapwork: error:"));
  CHECK_FALSE(fs::exists(dir / "small-out" / "spectrum.csv"));

  CHECK(run("spectrum --levels 0", dir).exit_code == 2);  // command-line value out of range
  CHECK(run("spectrum --no-such-option", dir).exit_code == 2);
  CHECK(run("", dir).exit_code == 2);  // no command
}

TEST_CASE("--help on the tool and on each command", "[cli]") {
  const fs::path dir = scratch_dir("help");
  const Run top = run("--help", dir);
  CHECK(top.exit_code == 0);
  CHECK_THAT(top.out, Contains("spectrum"));
  const Run spectrum = run("spectrum --help", dir);
  CHECK(spectrum.exit_code == 0);
  CHECK_THAT(spectrum.out, Contains("--levels") && Contains("--output") && Contains("--quiet"));
}
