// Property-based end-to-end stage: random small valid scenarios run through `trapwork work`.
//
// Each case is built from one 64-bit seed (std::mt19937_64): a particle, one potential shape
// among those the library has (harmonic, polynomial, gaussian, double_well, poschl_teller,
// power_walls) or a hard-walled [box], a protocol (a ramp of one parameter or a wall, or a
// sudden switch), a thermal initial state and, for a quarter of the open-grid cases,
// `--tolerance 1e-2`. Every dimensional value carries a unit ("40 u", "1 MHz", "50 nm",
// "2 us", "3 uK", "2 kB*uK"). Ranges are chosen so that each case is small (tens of levels,
// grids of hundreds of points) and takes about a second.
//
// Each case runs in a forked child (so a crash is caught and named) that an alarm stops after
// --case-seconds (a hang past that cost bound is a failure). The properties checked:
//   - the run ends normally, or is refused with PhysicsError (counted and printed: a refusal
//     with its message is an honest outcome); an InputError on a scenario built valid, any
//     other exception, a crash or a timeout fails (a sudden compression of hard walls is drawn
//     as well: the reader must refuse it, naming protocol.change);
//   - every file the report names exists, is not empty, and no temporary file is left beside it;
//     every CSV row has as many fields as its names line;
//   - the line probabilities (lines.csv, plus the total the summary reports for the lines left
//     out below the file's probability floor) plus the reported unresolved weight sum to 1 within
//     1e-9 (rounding; the probabilities are written as shortest round-trip text), and each lies
//     in [0, 1]; the cumulative column ends at the resolved weight;
//   - the Jarzynski residual is within its reported truncation bound, or a warning names it;
//   - every diagnostic check that fails (summary.json "checks") is reported by a warning that
//     names what it measured;
//   - <W> and sd(W) are finite numbers.
//
// Usage:
//   property_work [--corpus FILE] [--random N] [--seed S] [--case SEED] [--case-seconds T]
//                 [--keep DIR]
//   --corpus FILE   seeds to run first, one per line ('#' comments): tests/property/seeds.txt
//   --random N      then N random cases, seeds drawn from S (default: from the clock, printed)
//   --case SEED     run one case in this process and keep its files (reproduce a failure)
//   --show SEED     print the case's scenario only
// A failing case prints its seed and scenario; `property_work --case SEED` reproduces it.
// Longer runs: `property_work --random 2000 --case-seconds 60` (about an hour).
#include "solver/errors.hpp"
#include "solver/tool/commands.hpp"

#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <csignal>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <limits>
#include <nlohmann/json.hpp>
#include <optional>
#include <random>
#include <sstream>
#include <string>
#include <vector>

namespace fs = std::filesystem;
using trapwork::InputError;
using trapwork::PhysicsError;

namespace {

// ---- scenario generator ----------------------------------------------------------------------

struct Case {
  std::uint64_t seed = 0;
  std::string family;  // short description printed with the result
  std::string text;    // the scenario (TOML)
  std::optional<double> tolerance;
  // A case the scenario reader must refuse (a sudden compression of hard walls): an InputError
  // naming this key is its expected outcome.
  std::string refused_key;
};

class Draw {
 public:
  explicit Draw(std::uint64_t seed) : engine_(seed) {}
  double uniform(double a, double b) { return std::uniform_real_distribution<double>(a, b)(engine_); }
  double log_uniform(double a, double b) { return std::exp(uniform(std::log(a), std::log(b))); }
  int integer(int a, int b) { return std::uniform_int_distribution<int>(a, b)(engine_); }
  bool chance(double p) { return uniform(0, 1) < p; }
  template <class T>
  const T& pick(const std::vector<T>& v) {
    return v[std::size_t(integer(0, int(v.size()) - 1))];
  }

 private:
  std::mt19937_64 engine_;
};

// Numbers with 4 significant digits, so the scenario reads like a hand-written one.
std::string num(double v) {
  char text[32];
  std::snprintf(text, sizeof text, "%.4g", v);
  return text;
}
std::string q(double v, const std::string& unit) { return "\"" + num(v) + " " + unit + "\""; }

// A fixed small grid [-half, half] for the shapes of finite depth, whose automatic grid would
// follow the continuum levels far out (and take minutes): 256 or 320 points.
std::string grid(Draw& d, double half_um) {
  return "[grid]\npoints = " + std::to_string(d.pick<int>({256, 320})) + "\nleft = " + q(-half_um, "um") +
         "\nright = " + q(half_um, "um") + "\n";
}

std::string ramp(Draw& d) { return d.pick<std::string>({"linear", "smooth", "smoother"}); }

// A protocol duration: 0 (sudden) now and then, else between lo and hi in `unit`.
std::string duration(Draw& d, double lo, double hi, const std::string& unit) {
  if (d.chance(0.08)) return q(0, unit);
  return q(d.log_uniform(lo, hi), unit);
}

Case make_case(std::uint64_t seed) {
  Draw d(seed);
  Case c;
  c.seed = seed;
  std::ostringstream s;
  s << "title = \"property case " << seed << "\"\n";
  const int family = d.integer(0, 5);
  if (family <= 1) {  // an ion in a harmonic or polynomial trap: translation or frequency change
    const double mass = d.pick<double>({9, 24, 40, 88, 171});
    const double f = d.uniform(0.5, 2.0);  // MHz
    const bool quartic = family == 1;
    s << "[particle]\nmass = " << q(mass, "u") << "\n[units]\nenergy = \"h*kHz\"\n";
    s << "[[potential]]\nname = \"trap\"\nshape = \"" << (quartic ? "polynomial" : "harmonic") << "\"\n";
    s << "frequency = " << q(f, "MHz") << "\n";
    if (quartic) s << "quartic = " << q(d.uniform(0.001, 0.03), "h*Hz/nm^4") << "\n";
    const bool move = d.chance(0.6);
    s << "[protocol]\nduration = " << duration(d, 0.5, 3.0, "us") << "\n[[protocol.change]]\n";
    if (move)
      s << "parameter = \"trap.centre\"\nto = " << q(d.uniform(-30, 30), "nm") << "\n";
    else
      s << "parameter = \"trap.frequency\"\nto = " << q(f * d.uniform(0.8, 1.25), "MHz") << "\n";
    s << "ramp = \"" << ramp(d) << "\"\n";
    if (d.chance(0.5))
      s << "[initial]\nmean_phonons = " << num(d.uniform(0.05, 1)) << "\n";
    else  // hbar omega / kB is 48 uK at 1 MHz
      s << "[initial]\ntemperature = " << q(d.uniform(0.1, 0.8) * 48 * f, "uK") << "\n";
    c.family = std::string(quartic ? "polynomial" : "harmonic") + (move ? " translation" : " frequency change");
  } else if (family == 2) {  // an atom in an optical tweezer: depth or position changed
    const double mass = d.pick<double>({7, 40, 87, 133});
    const double depth = d.uniform(2, 10), waist = d.uniform(0.7, 1.5);  // kB*uK, um
    s << "[particle]\nmass = " << q(mass, "u") << "\n[units]\nenergy = \"kB*uK\"\n";
    s << "[[potential]]\nname = \"tweezer\"\nshape = \"gaussian\"\ndepth = " << q(depth, "kB*uK")
      << "\nwaist = " << q(waist, "um") << "\n";
    s << grid(d, 2.5 * waist);
    const bool move = d.chance(0.4);
    s << "[protocol]\nduration = " << duration(d, 20, 300, "us") << "\n[[protocol.change]]\n";
    if (move)
      s << "parameter = \"tweezer.centre\"\nto = " << q(d.uniform(-0.2, 0.2) * waist, "um") << "\n";
    else
      s << "parameter = \"tweezer.depth\"\nto = " << q(depth * d.uniform(0.7, 1.5), "kB*uK") << "\n";
    s << "ramp = \"" << ramp(d) << "\"\n";
    s << "[initial]\ntemperature = " << q(depth * d.uniform(0.03, 0.1), "uK") << "\n";
    c.family = std::string("gaussian tweezer") + (move ? " moved" : " depth change");
  } else if (family == 3) {  // a double well tilted
    const double barrier = d.uniform(0.5, 3), separation = d.uniform(0.6, 1.5);  // kB*uK, um
    s << "[particle]\nmass = \"87 u\"\n[units]\nenergy = \"kB*uK\"\n";
    s << "[[potential]]\nname = \"wells\"\nshape = \"double_well\"\nbarrier = " << q(barrier, "kB*uK")
      << "\nseparation = " << q(separation, "um") << "\n";
    s << grid(d, 1.1 * separation);
    s << "[protocol]\nduration = " << duration(d, 30, 200, "us") << "\n[[protocol.change]]\n";
    s << "parameter = \"wells.tilt\"\nto = " << q(barrier * d.uniform(-0.2, 0.2), "kB*uK") << "\n";
    s << "ramp = \"" << ramp(d) << "\"\n";
    s << "[initial]\ntemperature = " << q(barrier * d.uniform(0.05, 0.2), "uK") << "\n";
    c.family = "double well tilted";
  } else if (family == 4) {  // a Poschl-Teller well deepened or made shallower
    const double depth = d.uniform(2, 8), width = d.uniform(0.5, 1.2);  // kB*uK, um
    s << "[particle]\nmass = " << q(d.pick<double>({40, 87}), "u") << "\n[units]\nenergy = \"kB*uK\"\n";
    s << "[[potential]]\nname = \"well\"\nshape = \"poschl_teller\"\ndepth = " << q(depth, "kB*uK")
      << "\nwidth = " << q(width, "um") << "\n";
    s << grid(d, 5 * width);
    s << "[protocol]\nduration = " << duration(d, 20, 300, "us") << "\n[[protocol.change]]\n";
    s << "parameter = \"well.depth\"\nto = " << q(depth * d.uniform(0.7, 1.4), "kB*uK") << "\n";
    s << "ramp = \"" << ramp(d) << "\"\n";
    s << "[initial]\ntemperature = " << q(depth * d.uniform(0.03, 0.1), "uK") << "\n";
    c.family = "Poschl-Teller depth change";
  } else {  // a hard-walled box whose right wall moves (expansion or compression)
    const double mass = d.pick<double>({7, 23, 40, 87});
    const double length = d.uniform(3, 10);  // um
    // E_1 = pi^2 hbar^2 / (2 m L^2) in nK: hbar^2 / (u um^2 kB) = 485.1 nK (from the CODATA 2018
    // hbar, u and kB, computed here); 0.275 nK for 87 u in 10 um, as examples/box_expansion.toml says
    const double e1_nK = 9.8696 * 485.1 / (2 * mass * length * length);
    const double tau1_ms = 7.638 / e1_nK;  // hbar / E_1 in ms (hbar / kB = 7.638e-12 K s)
    s << "[particle]\nmass = " << q(mass, "u") << "\n[units]\nenergy = \"kB*nK\"\n";
    s << "[box]\nleft = \"0 um\"\nright = " << q(length, "um") << "\n";
    s << "[grid]\npoints = " << d.pick<int>({127, 255}) << "\n";
    s << "[protocol]\nduration = " << duration(d, 0.3 * tau1_ms, 3 * tau1_ms, "ms") << "\n[[protocol.change]]\n";
    const double to = length * d.uniform(0.8, 1.5);
    s << "parameter = \"box.right\"\nto = " << q(to, "um") << "\n";
    s << "ramp = \"" << ramp(d) << "\"\n";
    s << "[initial]\ntemperature = " << q(e1_nK * d.uniform(1, 8), "nK") << "\n";
    c.family = to >= length ? "box expansion" : "box compression";
    if (to < length && c.text.empty() && s.str().find("duration = \"0 ms\"") != std::string::npos)
      c.refused_key = "protocol.change";
  }
  if (family <= 4 && d.chance(0.25)) c.tolerance = 1e-2;
  s << "[output]\nfolder = \"out\"\n";
  c.text = s.str();
  return c;
}

// ---- properties ------------------------------------------------------------------------------

struct Csv {
  std::vector<std::string> names;
  std::vector<std::vector<double>> rows;
  std::string problem;  // empty: whole
};

Csv read_csv(const fs::path& p) {
  Csv c;
  std::ifstream in(p);
  std::string line;
  if (!std::getline(in, line)) {
    c.problem = "no names line";
    return c;
  }
  std::istringstream names(line);
  for (std::string f; std::getline(names, f, ',');) c.names.push_back(f);
  for (int number = 2; std::getline(in, line); ++number) {
    if (line.empty() || line[0] == '#') continue;
    std::vector<double> row;
    // Fields between commas; an empty one is a column that does not apply to the run (NaN).
    for (std::size_t start = 0;;) {
      const std::size_t comma = std::min(line.find(',', start), line.size());
      const std::string f = line.substr(start, comma - start);
      char* end = nullptr;
      row.push_back(f.empty() ? std::nan("") : std::strtod(f.c_str(), &end));
      if (!f.empty() && (end == f.c_str() || *end != '\0'))
        c.problem = "line " + std::to_string(number) + ": not a number: " + f;
      if (comma == line.size()) break;
      start = comma + 1;
    }
    if (row.size() != c.names.size())
      c.problem = "line " + std::to_string(number) + ": " + std::to_string(row.size()) + " fields for " +
                  std::to_string(c.names.size()) + " names";
    c.rows.push_back(row);
  }
  return c;
}

std::string lower(std::string s) {
  for (char& ch : s) ch = char(std::tolower(static_cast<unsigned char>(ch)));
  return s;
}

// The word a warning about each check carries (the check's subject as the warnings word it).
std::vector<std::string> warning_words(const std::string& check) {
  if (check == "norm drift") return {"norm"};
  if (check == "unresolved weight") return {"unresolved"};
  if (check == "edge amplitude") return {"edge"};
  if (check == "time-step error") return {"time step", "steps"};
  if (check == "grid convergence") return {"finer grid", "grid"};
  if (check == "Jarzynski residual") return {"jarzynski"};
  if (check == "Crooks ratio error") return {"crooks"};
  return {lower(check)};
}

// Checks the outputs of a finished run; returns the failures (empty: all properties hold).
std::vector<std::string> check_outputs(const fs::path& folder, const std::string& report) {
  std::vector<std::string> failures;
  auto fail = [&](const std::string& what) { failures.push_back(what); };
  // files the report names
  std::istringstream lines(report);
  std::vector<fs::path> files;
  for (std::string line; std::getline(lines, line);)
    if (line.rfind("wrote ", 0) == 0) files.emplace_back(line.substr(6));
  if (files.empty()) fail("the report names no files");
  for (const auto& f : files) {
    std::error_code ec;
    if (!fs::exists(f, ec) || fs::file_size(f, ec) == 0) fail("missing or empty: " + f.string());
    if (f.extension() == ".csv") {
      const Csv c = read_csv(f);
      if (!c.problem.empty()) fail(f.filename().string() + ": " + c.problem);
    }
  }
  for (const auto& e : fs::directory_iterator(folder)) {
    const std::string name = e.path().filename().string();
    // The folder's lock and its list of outputs stay by design (solver/scenario/output.hpp); a
    // staging folder or a temporary file does not.
    if (name == ".trapwork-lock" || name == ".trapwork-outputs") continue;
    if (name.find(".tmp") != std::string::npos || name[0] == '.') fail("temporary file left: " + name);
  }
  // summary.json
  nlohmann::json summary;
  try {
    std::ifstream in(folder / "summary.json");
    summary = nlohmann::json::parse(in);
  } catch (const std::exception& e) {
    fail(std::string("summary.json does not parse: ") + e.what());
    return failures;
  }
  std::vector<std::string> warnings;
  for (const auto& w : summary.value("warnings", nlohmann::json::array())) warnings.push_back(lower(w.get<std::string>()));
  auto warned = [&](const std::vector<std::string>& words) {
    for (const auto& w : warnings)
      for (const auto& word : words)
        if (w.find(word) != std::string::npos) return true;
    return false;
  };
  const auto& work = summary["work"];
  const auto& diagnostics = summary["diagnostics"];
  // a number, or an energy written as {"value", "internal", ...}: its value; null: NaN
  auto number = [](const nlohmann::json& j) {
    const nlohmann::json& v = j.is_object() ? j.value("value", nlohmann::json()) : j;
    return v.is_number() ? v.get<double>() : std::numeric_limits<double>::quiet_NaN();
  };
  if (!std::isfinite(number(work["mean"])) || !std::isfinite(number(work["sd"])))
    fail("<W> or sd(W) is not a finite number: " + work["mean"].dump() + ", " + work["sd"].dump());
  // probabilities
  const Csv lines_csv = read_csv(folder / "lines.csv");
  std::size_t p_col = lines_csv.names.size(), cum_col = p_col;
  for (std::size_t i = 0; i < lines_csv.names.size(); ++i) {
    if (lines_csv.names[i] == "probability") p_col = i;
    if (lines_csv.names[i] == "cumulative") cum_col = i;
  }
  if (p_col == lines_csv.names.size() || lines_csv.rows.empty()) {
    fail("lines.csv has no probability column or no lines");
  } else {
    double sum = 0;
    for (const auto& r : lines_csv.rows) {
      if (!(r[p_col] >= 0 && r[p_col] <= 1)) fail("a line probability outside [0, 1]: " + num(r[p_col]));
      sum += r[p_col];
    }
    const double unresolved = number(diagnostics["unresolved_weight"]);
    // the lines below the file's probability floor (issue 16), left out and counted in the summary
    sum += number(work["lines_file"]["left_out_probability"]);
    // rounding: lines x eps; 1e-9 is far above it and far below any physics
    if (!(std::abs(sum + unresolved - 1) <= 1e-9))
      fail("line probabilities " + num(sum) + " (with those left out below the floor) + unresolved weight " +
           num(unresolved) + " != 1 (off by " + num(sum + unresolved - 1) + ")");
    if (cum_col < lines_csv.names.size() && !(std::abs(lines_csv.rows.back()[cum_col] - sum) <= 1e-9))
      fail("cumulative column ends at " + num(lines_csv.rows.back()[cum_col]) + ", the lines sum to " + num(sum));
  }
  // Jarzynski residual within its bound, or warned
  const auto& jarzynski = summary["jarzynski"];
  const double residual = number(jarzynski["residual"]), bound = number(jarzynski["truncation_bound"]);
  if (std::isfinite(residual) && std::isfinite(bound) && std::abs(residual) > bound + 1e-9 && !warned({"jarzynski"}))
    fail("Jarzynski residual " + num(residual) + " above its bound " + num(bound) + " without a warning");
  // failed checks are warned
  for (const auto& check : diagnostics.value("checks", nlohmann::json::array())) {
    if (check.value("pass", true)) continue;
    const std::string name = check.value("name", std::string());
    if (!warned(warning_words(name)))
      fail("check \"" + name + "\" fails (" + check["value"].dump() + " > " + check["tolerance"].dump() +
           ") without a warning that names it");
  }
  return failures;
}

// ---- running a case --------------------------------------------------------------------------

enum Outcome { passed = 0, failed = 1, input_error = 2, other_error = 3, refused = 10 };

// Runs the case in this process, in `dir`; prints what went wrong; returns the outcome.
int run_case(const Case& c, const fs::path& dir, bool verbose) {
  fs::create_directories(dir);
  const fs::path file = dir / "case.toml";
  std::ofstream(file) << c.text;
  trapwork::WorkCommand command;
  command.scenario = file.string();
  command.output = (dir / "out").string();
  command.tolerance = c.tolerance;
  std::ostringstream report, progress;
  try {
    trapwork::run_work_command(command, report, progress);
  } catch (const PhysicsError& e) {
    std::cout << "  refused: " << e.what() << '\n';
    return refused;
  } catch (const InputError& e) {
    if (!c.refused_key.empty() && e.key == c.refused_key) {
      std::cout << "  refused as it must be: " << e.what() << '\n';
      return refused;
    }
    std::cout << "  InputError on a scenario built valid: " << e.what() << '\n';
    return input_error;
  } catch (const std::exception& e) {
    std::cout << "  unexpected exception: " << e.what() << '\n';
    return other_error;
  }
  if (verbose) std::cout << report.str();
  const auto failures = check_outputs(dir / "out", report.str());
  for (const auto& f : failures) std::cout << "  property: " << f << '\n';
  return failures.empty() ? passed : failed;
}

// splitmix64 (Steele, Lea and Flood 2014; common practice): well-spread case seeds from one.
std::uint64_t splitmix(std::uint64_t x) {
  x += 0x9e3779b97f4a7c15ull;
  x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ull;
  x = (x ^ (x >> 27)) * 0x94d049bb133111ebull;
  return x ^ (x >> 31);
}

}  // namespace

int main(int argc, char** argv) {
  std::string corpus;
  int random_cases = 0;
  std::optional<std::uint64_t> base, single;
  int case_seconds = 30;
  fs::path keep = fs::temp_directory_path() / ("trapwork-property-" + std::to_string(::getpid()));
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto value = [&]() -> std::string {
      if (i + 1 >= argc) {
        std::cerr << "property_work: " << a << " needs a value\n";
        std::exit(2);
      }
      return argv[++i];
    };
    if (a == "--corpus") corpus = value();
    else if (a == "--random") random_cases = std::stoi(value());
    else if (a == "--seed") base = std::stoull(value());
    else if (a == "--case") single = std::stoull(value());
    else if (a == "--case-seconds") case_seconds = std::stoi(value());
    else if (a == "--keep") keep = value();
    else if (a == "--show") {  // print a case's scenario without running it
      const Case c = make_case(std::stoull(value()));
      std::cout << "# " << c.family << (c.tolerance ? ", --tolerance 0.01" : "") << '\n' << c.text;
      return 0;
    }
    else {
      std::cerr << "property_work: unknown option " << a
                << " (--corpus FILE, --random N, --seed S, --case SEED, --show SEED, --case-seconds T, --keep DIR)\n";
      return 2;
    }
  }
  if (single) {  // reproduce one case here, files kept
    const Case c = make_case(*single);
    std::cout << "case " << c.seed << " (" << c.family << (c.tolerance ? ", --tolerance 0.01" : "") << ") in "
              << keep.string() << ":\n" << c.text;
    const int outcome = run_case(c, keep, true);
    std::cout << (outcome == passed ? "passed" : outcome == refused ? "refused" : "FAILED") << '\n';
    return outcome == passed || outcome == refused ? 0 : 1;
  }

  std::vector<std::uint64_t> seeds;
  if (!corpus.empty()) {
    std::ifstream in(corpus);
    if (!in) {
      std::cerr << "property_work: cannot read the corpus " << corpus << '\n';
      return 2;
    }
    for (std::string line; std::getline(in, line);) {
      line = line.substr(0, line.find('#'));
      std::istringstream fields(line);
      std::uint64_t s;
      if (fields >> s) seeds.push_back(s);
    }
  }
  if (random_cases > 0) {
    if (!base) base = std::uint64_t(std::chrono::system_clock::now().time_since_epoch().count());
    std::cout << "random cases from base seed " << *base << " (rerun them with --seed " << *base << ")\n";
    for (int i = 0; i < random_cases; ++i) seeds.push_back(splitmix(*base + std::uint64_t(i)));
  }

  int failures = 0, refusals = 0;
  for (std::uint64_t seed : seeds) {
    const Case c = make_case(seed);
    const fs::path dir = keep / std::to_string(seed);
    fs::remove_all(dir);
    const auto start = std::chrono::steady_clock::now();
    std::cout << "case " << seed << " (" << c.family << (c.tolerance ? ", --tolerance 0.01" : "") << ")\n"
              << std::flush;
    const pid_t pid = fork();
    if (pid == 0) {
      alarm(unsigned(case_seconds));
      const int outcome = run_case(c, dir, false);
      std::cout.flush();
      _exit(outcome);
    }
    int status = 0;
    waitpid(pid, &status, 0);
    const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    std::string verdict;
    if (WIFSIGNALED(status))
      verdict = WTERMSIG(status) == SIGALRM ? "TIMEOUT after " + std::to_string(case_seconds) + " s (hang past its cost bound)"
                                            : "CRASHED with signal " + std::to_string(WTERMSIG(status));
    else if (WEXITSTATUS(status) == passed)
      verdict = "ok";
    else if (WEXITSTATUS(status) == refused)
      verdict = "refused (ok)";
    else
      verdict = "FAILED";
    char line[64];
    std::snprintf(line, sizeof line, " %.1f s", seconds);
    std::cout << "  " << verdict << line << '\n';
    if (verdict == "refused (ok)") ++refusals;
    if (verdict != "ok" && verdict != "refused (ok)") {
      ++failures;
      std::cout << "  reproduce: property_work --case " << seed << "\n  scenario:\n" << c.text;
    } else {
      fs::remove_all(dir);
    }
  }
  std::cout << seeds.size() << " cases: " << seeds.size() - std::size_t(failures) - std::size_t(refusals)
            << " passed, " << refusals << " refused with a reason, " << failures << " failed\n";
  if (failures == 0) fs::remove_all(keep);
  return failures == 0 ? 0 : 1;
}
