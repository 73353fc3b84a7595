// Output files and printed reports of the command-line tool (see output.hpp).
#include "solver/scenario/output.hpp"

#include <fcntl.h>
#include <sys/file.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <csignal>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <fstream>
#include <limits>
#include <set>
#include <sstream>
#include <stdexcept>

#include "solver/errors.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

namespace fs = std::filesystem;

void write_file_atomically(const fs::path& path, const std::function<void(std::ostream&)>& write) {
  fs::path temporary = path;
  temporary += ".tmp-" + std::to_string(::getpid());
  try {
    {
      std::ofstream out(temporary, std::ios::binary | std::ios::trunc);
      if (!out) throw std::runtime_error("cannot create '" + temporary.string() + "'");
      write(out);
      out.close();
      if (out.fail()) throw std::runtime_error("cannot write '" + temporary.string() + "' (disk full?)");
    }
    fs::rename(temporary, path);
  } catch (...) {
    std::error_code ignored;
    fs::remove(temporary, ignored);
    throw;
  }
}

// ---- one run's hold on its output folder (output.hpp) ------------------------------------

namespace {

constexpr const char* lock_name = ".trapwork-lock";
constexpr const char* manifest_name = ".trapwork-outputs";
constexpr const char* staging_prefix = ".trapwork-new-";

// Set by the handler of SIGINT and SIGTERM during a write phase; the handler does nothing else
// (only async-signal-safe work belongs in a handler), commit() acts on it.
volatile std::sig_atomic_t interrupted_by = 0;
struct sigaction previous_int, previous_term;

extern "C" void note_signal(int signal) {
  interrupted_by = signal;
}

bool same_file(const fs::path& a, const fs::path& b) {
  std::error_code ec;
  return fs::equivalent(a, b, ec) && !ec;
}

std::string folder_error(const std::string& what, int error) {
  return what + " (" + std::strerror(error) + ")";
}

}  // namespace

std::vector<OutputRun::Input> scenario_inputs(const Scenario& scenario) {
  std::vector<OutputRun::Input> inputs;
  if (scenario.file.empty() || scenario.file == "default") return inputs;
  inputs.push_back({scenario.file, "the scenario"});
  const fs::path base = fs::path(scenario.file).parent_path();
  for (const auto& term : scenario.terms)
    for (const auto& [key, value] : term.settings)
      if (key == "file") {
        std::string name = value;  // as found in the file: in quotes
        if (name.size() >= 2 && name.front() == '"' && name.back() == '"') name = name.substr(1, name.size() - 2);
        inputs.push_back({base / name, "a table file of the scenario"});
      }
  if (scenario.protocol)
    for (const auto& change : scenario.protocol->changes)
      if (!change.file.empty()) inputs.push_back({base / change.file, "a ramp table of the scenario"});
  return inputs;
}

OutputRun::OutputRun(fs::path folder, std::vector<std::string> names, const std::vector<Input>& inputs,
                     std::string command)
    : folder_(std::move(folder)), names_(std::move(names)) {
  const std::string where = folder_.string();
  // 1. No output replaces an input (compared by identity, so other spellings of a path count).
  for (const auto& input : inputs) {
    inputs_.push_back(input.path);
    if (same_file(input.path, folder_))
      throw InputError("--output", where, "an output folder, not " + input.what + " (" + input.path.string() + ")");
    for (const auto& name : names_)
      if (same_file(input.path, folder_ / name))
        throw InputError("--output", where,
                         "an output folder where this run does not replace its own input: " + name + " here is " +
                             input.what + " (" + input.path.string() + "); write to another folder (-o) or move "
                             "the input",
                         "", input.path.string());
  }
  // 2. The folder exists and can be written: the lock file is the first file written.
  std::error_code ec;
  created_ = !fs::exists(folder_, ec);
  fs::create_directories(folder_, ec);
  if (ec || !fs::is_directory(folder_))
    throw InputError("", "", "cannot create the output folder: " +
                                 (ec ? ec.message() : std::string("a file of that name exists")),
                     "", where);
  const fs::path lock = folder_ / lock_name;
  lock_fd_ = ::open(lock.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0644);
  if (lock_fd_ < 0) {
    const int error = errno;
    if (created_) fs::remove(folder_, ec);
    throw InputError("", "", folder_error("cannot write in the output folder", error), "", where);
  }
  // 3. The advisory lock. Whoever holds it wrote who they are into the file.
  if (::flock(lock_fd_, LOCK_EX | LOCK_NB) != 0) {
    const int error = errno;
    std::string holder;
    char buffer[512];
    const ssize_t n = ::pread(lock_fd_, buffer, sizeof buffer - 1, 0);
    if (n > 0) holder.assign(buffer, std::size_t(n));
    while (!holder.empty() && holder.back() == '\n') holder.pop_back();
    for (std::size_t at; (at = holder.find('\n')) != std::string::npos;) holder.replace(at, 1, ", ");
    ::close(lock_fd_);
    lock_fd_ = -1;
    if (error == EWOULDBLOCK)
      throw InputError("", "", "the output folder is in use by another trapwork run (" +
                                   (holder.empty() ? std::string("no details yet") : holder) +
                                   "): wait for it to finish, or write to another folder (-o)",
                       "", where);
    throw InputError("", "", folder_error("cannot lock the output folder", error), "", where);
  }
  char host[256] = "unknown";
  ::gethostname(host, sizeof host - 1);
  const std::time_t now = std::time(nullptr);
  char started[64];
  std::strftime(started, sizeof started, "%Y-%m-%d %H:%M:%S UTC", std::gmtime(&now));
  const std::string me = "pid " + std::to_string(::getpid()) + "\nhost " + host + "\ncommand " + command +
                         "\nstarted " + started + "\n";
  if (::ftruncate(lock_fd_, 0) != 0 || ::pwrite(lock_fd_, me.data(), me.size(), 0) != ssize_t(me.size())) {
    const int error = errno;
    ::close(lock_fd_);
    lock_fd_ = -1;
    throw InputError("", "", folder_error("cannot write in the output folder", error), "", where);
  }
  // Left behind by a run that was killed (its lock is gone, we hold it now): staging folders
  // and temporary files of trapwork's own outputs.
  for (const auto& entry : fs::directory_iterator(folder_, ec)) {
    const std::string name = entry.path().filename().string();
    bool stale = name.rfind(staging_prefix, 0) == 0;
    for (const auto& output : names_) stale = stale || name.rfind(output + ".tmp-", 0) == 0;
    if (stale) fs::remove_all(entry.path(), ec);
  }
}

const fs::path& OutputRun::staging() {
  if (!staging_.empty()) return staging_;
  fs::path path = folder_ / (staging_prefix + std::to_string(::getpid()));
  std::error_code ec;
  fs::create_directory(path, ec);
  if (ec)
    throw InputError("", "", "cannot write in the output folder (" + ec.message() + ")", "", folder_.string());
  staging_ = path;
  // The write phase: a SIGINT or SIGTERM now only sets the flag, commit() acts on it.
  interrupted_by = 0;
  struct sigaction action {};
  action.sa_handler = note_signal;
  sigemptyset(&action.sa_mask);
  action.sa_flags = SA_RESTART;
  ::sigaction(SIGINT, &action, &previous_int);
  ::sigaction(SIGTERM, &action, &previous_term);
  handling_ = true;
  return staging_;
}

void OutputRun::restore_signals() {
  if (!handling_) return;
  ::sigaction(SIGINT, &previous_int, nullptr);
  ::sigaction(SIGTERM, &previous_term, nullptr);
  handling_ = false;
}

std::vector<fs::path> OutputRun::commit(const std::vector<fs::path>& files) {
  for (const auto& file : files) {
    const std::string name = file.filename().string();
    if (std::find(names_.begin(), names_.end(), name) == names_.end())
      throw std::logic_error("OutputRun: '" + name + "' is not among the declared outputs");
  }
  sigset_t held, before;
  sigemptyset(&held);
  sigaddset(&held, SIGINT);
  sigaddset(&held, SIGTERM);
  ::pthread_sigmask(SIG_BLOCK, &held, &before);
  std::error_code ec;
  if (interrupted_by != 0) {  // stopped during the write phase: keep the previous run
    const int signal = interrupted_by;
    if (!staging_.empty()) fs::remove_all(staging_, ec);
    staging_.clear();
    restore_signals();
    ::close(lock_fd_);
    lock_fd_ = -1;
    committed_ = true;
    ::pthread_sigmask(SIG_SETMASK, &before, nullptr);
    std::raise(signal);  // the previous disposition (by default: the process ends)
    throw std::runtime_error("interrupted by signal " + std::to_string(signal));
  }
  // Whatever happens below, the signals held back are let through again.
  struct Release {
    sigset_t mask;
    ~Release() { ::pthread_sigmask(SIG_SETMASK, &mask, nullptr); }
  } release{before};
  std::vector<fs::path> out;
  std::set<std::string> written;
  for (const auto& file : files) {
    const std::string name = file.filename().string();
    const fs::path target = folder_ / name;
    if (!staging_.empty() && file.parent_path() == staging_) fs::rename(file, target);
    out.push_back(target);
    written.insert(name);
  }
  // The previous run's outputs that this run did not write again, except the run's inputs.
  {
    std::ifstream manifest(folder_ / manifest_name);
    for (std::string name; std::getline(manifest, name);) {
      if (name.empty() || name.find('/') != std::string::npos || name[0] == '.' || written.count(name)) continue;
      const fs::path old = folder_ / name;
      const bool input = std::any_of(inputs_.begin(), inputs_.end(), [&](const fs::path& p) { return same_file(p, old); });
      if (!input) fs::remove(old, ec);
    }
  }
  write_file_atomically(folder_ / manifest_name, [&](std::ostream& o) {
    for (const auto& name : written) o << name << '\n';
  });
  if (!staging_.empty()) fs::remove_all(staging_, ec);
  staging_.clear();
  committed_ = true;
  restore_signals();
  return out;  // a signal held back arrives when `release` ends (after the handler is restored)
}

OutputRun::~OutputRun() {
  std::error_code ec;
  if (!staging_.empty()) fs::remove_all(staging_, ec);
  restore_signals();
  if (!committed_ && created_) {  // a failed run leaves no folder it made
    fs::remove(folder_ / lock_name, ec);
    fs::remove(folder_, ec);  // only when empty
  }
  if (lock_fd_ >= 0) ::close(lock_fd_);
}

std::string_view trapwork_version() { return TRAPWORK_VERSION; }

nlohmann::ordered_json provenance_json(const Scenario& scenario) {
  return {{"trapwork_version", std::string(trapwork_version())},
          {"invocation", scenario.invocation},
          {"changed_values", scenario.changed_values}};
}

nlohmann::ordered_json with_provenance(nlohmann::ordered_json summary, const Scenario& scenario) {
  const nlohmann::ordered_json provenance = provenance_json(scenario);  // the loop must not range over a temporary
  for (const auto& [key, value] : provenance.items()) summary[key] = value;
  return summary;
}

std::string number_text(double v) {
  if (std::isnan(v)) return "nan";
  if (std::isinf(v)) return v > 0 ? "inf" : "-inf";
  char buffer[32];
  const auto r = std::to_chars(buffer, buffer + sizeof buffer, v);  // shortest round trip
  return std::string(buffer, r.ptr);
}

void write_csv(std::ostream& out, const CsvTable& table) {
  const std::size_t rows = table.columns.empty() ? 0 : table.columns.front().values.size();
  for (std::size_t c = 0; c < table.columns.size(); ++c) {
    if (table.columns[c].values.size() != rows)
      throw std::logic_error("write_csv: column '" + table.columns[c].name + "' has a different length");
    out << (c ? "," : "") << table.columns[c].name;
  }
  out << '\n';
  if (!table.left_out_of_file.empty() && table.left_out_of_file.size() != rows)
    throw std::logic_error("write_csv: left_out_of_file has a different length");
  for (const auto& comment : table.comments) out << "# " << comment << '\n';
  for (std::size_t r = 0; r < rows; ++r) {
    if (!table.left_out_of_file.empty() && table.left_out_of_file[r]) continue;
    for (std::size_t c = 0; c < table.columns.size(); ++c)
      out << (c ? "," : "") << (table.columns[c].applies ? number_text(table.columns[c].values[r]) : "");
    out << '\n';
  }
}

CsvColumn absent_column(std::string name, std::size_t rows) {
  return {std::move(name), std::vector<double>(rows, std::numeric_limits<double>::quiet_NaN()), false};
}

std::string column_unit(const std::string& unit) {
  std::string name;
  for (char c : unit) {
    const bool keep = std::isalnum(static_cast<unsigned char>(c));
    if (keep)
      name += c;
    else if (!name.empty() && name.back() != '_')
      name += '_';
  }
  while (!name.empty() && name.back() == '_') name.pop_back();
  return name;
}

namespace {
double nan() {
  return std::numeric_limits<double>::quiet_NaN();
}
}  // namespace

Display display(const Scenario& s) {
  Display d{s.energy.internal_per_unit, internal_per_um(s), s.energy.name, "_"};
  d.e_col += column_unit(s.energy.name);
  return d;
}

std::string short_number(double v, int digits) {
  if (!std::isfinite(v)) return std::isnan(v) ? "-" : (v > 0 ? "inf" : "-inf");
  char buffer[48];
  std::snprintf(buffer, sizeof buffer, "%.*g", digits, v);
  return buffer;
}

std::string si_unit(const Dimension& d) {
  if (d == Dimension::none()) return "";
  if (d == Dimension::frequency()) return "Hz";
  if (d == Dimension::length()) return "m";
  if (d == Dimension::energy()) return "J";
  if (d == Dimension::mass()) return "kg";
  if (d == Dimension::time()) return "s";
  for (int n = 3; n <= 8; ++n)
    if (d == Dimension::energy_per_length(n)) return "J/m^" + std::to_string(n);
  return d.describe();
}

namespace {
double rms_width(const Level& l) {
  return std::sqrt(std::max(0.0, l.mean_x2 - l.mean_x * l.mean_x));
}

double convergence_of(const SpectrumResult& r, std::size_t n) {
  const auto& c = r.convergence;
  return c.done && n < c.energy_change.size() ? c.energy_change[n] : nan();
}

}  // namespace

nlohmann::ordered_json grid_json(const Grid& g, const Display& d) {
  return {{"boundary", g.boundary() == Boundary::periodic ? "periodic" : "hard_wall"},
          {"points", g.size()},
          {"left", d.length(g.left())},
          {"right", d.length(g.right())},
          {"spacing", d.length(g.spacing())}};
}

std::string grid_text(const Grid& g, const Display& d) {
  return std::string(g.boundary() == Boundary::periodic ? "periodic (Fourier)" : "hard walls (sine basis)") +
         ", " + std::to_string(g.size()) + " points on [" + short_number(d.length(g.left())) + ", " +
         short_number(d.length(g.right())) + "] um, spacing " + short_number(d.length(g.spacing()) * 1e3) +
         " nm";
}

nlohmann::ordered_json potential_json(const Scenario& scenario) {
  using json = nlohmann::ordered_json;
  const UnitSystem& u = scenario.units;
  json terms = json::array();
  for (const auto& term : scenario.terms) {
    json parameters = json::object();
    for (const auto& p : term.parameters)
      parameters[p.name] = {{"given", p.given},
                            {"si", conversion_rounded(u.to_si(p.internal, p.dimension))},
                            {"si_unit", si_unit(p.dimension)},
                            {"internal", p.internal}};
    json settings = json::object();
    for (const auto& [k, v] : term.settings) settings[k] = v;
    terms.push_back(
        {{"name", term.name}, {"shape", term.shape}, {"parameters", parameters}, {"settings", settings}});
  }
  return terms;
}

std::string natural_units_text(const Scenario& scenario) {
  const UnitSystem& u = scenario.units;
  std::string text = "hbar = m = 1 (m = " + short_number(u.mass_kg / si::atomic_mass) + " u), length L0 = " +
                     lab_text(u.length_m, Dimension::length()) + ", energy hbar^2/(m L0^2) = " +
                     lab_text(u.energy_J(), Dimension::energy());
  if (scenario.reference_frequency_Hz)
    text += " = hbar*omega_ref (f_ref = " + lab_text(*scenario.reference_frequency_Hz, Dimension::frequency()) + ")";
  text += ", time m L0^2/hbar = " + lab_text(u.time_s(), Dimension::time());
  if (scenario.reference_frequency_Hz) text += " = 1/omega_ref";
  text += ", temperature (energy unit)/kB = " + lab_text(u.energy_J() / si::boltzmann, Dimension::temperature());
  text += "; frequencies angular (omega, in 1/time)";
  return text;
}

nlohmann::ordered_json units_json(const Scenario& scenario) {
  using json = nlohmann::ordered_json;
  const Display d = display(scenario);
  const UnitSystem& u = scenario.units;
  return {{"energy", d.e},
          {"energy_J", d.energy_per * u.energy_J()},
          {"length", "um"},
          {"frequency", "Hz (ordinary frequency f; omega = 2 pi f)"},
          {"wavefunction", "1/sqrt(um)"},
          {"internal",
           {{"mass_kg", u.mass_kg},
            {"length_m", u.length_m},
            {"energy_J", u.energy_J()},
            {"time_s", u.time_s()},
            {"reference_frequency_Hz",
             scenario.reference_frequency_Hz ? json(*scenario.reference_frequency_Hz) : json(nullptr)},
            {"omega_ref", scenario.omega_ref}}},
          {"natural",
           {{"used", scenario.natural_units},
            {"meaning", scenario.natural_units ? json(natural_units_text(scenario)) : json(nullptr)}}}};
}

void print_row(std::ostream& out, const std::string& label, const std::string& text) {
  char buffer[24];
  std::snprintf(buffer, sizeof buffer, "  %-12s", label.c_str());
  out << buffer << text << '\n';
}

void print_scenario_header(std::ostream& out, const std::string& command, const Scenario& scenario) {
  const Display d = display(scenario);
  const UnitSystem& u = scenario.units;
  out << "trapwork " << command << ": " << (scenario.title.empty() ? scenario.file : scenario.title) << '\n';
  print_row(out, "scenario", scenario.file);
  if (!scenario.changed_values.empty()) {
    std::string changed;
    for (const auto& c : scenario.changed_values) changed += (changed.empty() ? "" : ", ") + c;
    print_row(out, "changed", changed + " (on top of the file)");
  }
  print_row(out, "particle",
            "mass " + short_number(u.mass_kg / si::atomic_mass) + " u (" + short_number(u.mass_kg) + " kg)");
  print_row(out, "units",
            "internal L0 = " + lab_text(u.length_m, Dimension::length()) + ", E0 = hbar^2/(m L0^2) = " +
                lab_text(u.energy_J(), Dimension::energy()) + ", T0 = " + lab_text(u.time_s(), Dimension::time()) +
                "; energies shown in " + d.e);
  if (scenario.natural_units) print_row(out, "natural", "bare numbers in the file: " + natural_units_text(scenario));
  for (const auto& term : scenario.terms) {
    std::string text = term.name + ": " + term.shape;
    for (const auto& p : term.parameters) text += ", " + p.name + " = " + p.given;
    for (const auto& [k, v] : term.settings) text += ", " + k + " = " + v;
    print_row(out, "potential", text);
  }
  if (scenario.spectrum.box)
    print_row(out, "box",
              "hard walls at " + short_number(d.length(scenario.spectrum.box->first)) + " um and " +
                  short_number(d.length(scenario.spectrum.box->second)) + " um");
}

const std::string internal_energy_column = "energy_hbar2_per_m_L0sq";

CsvTable spectrum_table(const Scenario& scenario, const SpectrumResult& result) {
  const Display d = display(scenario);
  CsvTable t;
  auto& c = t.columns;
  c = {{"level", {}},
       {"energy" + d.e_col, {}},
       {internal_energy_column, {}},
       {"spacing" + d.e_col, {}},
       {"mean_x_um", {}},
       {"rms_width_um", {}},
       {"harmonic_shift" + d.e_col, {}},
       {"bound", {}},
       {"group", {}},
       {"residual" + d.e_col, {}},
       {"edge_amplitude", {}},
       {"convergence" + d.e_col, {}}};
  for (std::size_t n = 0; n < result.levels.size(); ++n) {
    const Level& l = result.levels[n];
    const double row[] = {double(n),
                          d.energy(l.energy),
                          l.energy,
                          d.energy(l.spacing),
                          d.length(l.mean_x),
                          d.length(rms_width(l)),
                          d.energy(l.harmonic_shift),
                          l.bound ? 1.0 : 0.0,
                          double(l.group),
                          d.energy(l.residual),
                          l.edge_amplitude,
                          d.energy(convergence_of(result, n))};
    for (std::size_t k = 0; k < c.size(); ++k) c[k].values.push_back(row[k]);
  }
  c[6].applies = result.harmonic.omega > 0;  // harmonic_shift
  c[11].applies = result.convergence.done;   // convergence
  t.comments = {
      "trapwork spectrum: " + (scenario.title.empty() ? scenario.file : scenario.title),
      "scenario: " + scenario.file,
      "energies in " + d.e + " (one " + d.e + " = " + number_text(d.energy_per) +
          " internal units); " + internal_energy_column + " in hbar^2/(m L0^2) with L0 = " +
          number_text(scenario.units.length_m) + " m; lengths in um",
      "spacing: E(n+1) - E(n), nan for the last level; harmonic_shift: E(n) - (V_min + hbar omega_h (n + "
      "1/2)) "
      "with the harmonic approximation at the minimum (empty where it has no curvature)",
      "rms_width: sqrt(<x^2> - <x>^2); bound: 1 below the potential's lower asymptote; group: index of the "
      "group of levels closer than the degeneracy tolerance",
      "residual: ||H psi - E psi||; edge_amplitude: max |psi|^2 in the outer 2% of an open grid relative to "
      "max |psi|^2; convergence: |E(n) on a finer, wider grid - E(n)| (empty without the check)",
      "an empty column does not apply to this run; every spectrum.csv has the same columns",
  };
  return t;
}

CsvTable states_table(const Scenario& scenario, const SpectrumResult& result) {
  const Display d = display(scenario);
  const Spectrum& s = result.spectrum;
  CsvTable t;
  CsvColumn x{"x_um", {}};
  for (double xi : s.grid.points()) x.values.push_back(d.length(xi));
  t.columns.push_back(std::move(x));
  // sum_j psi_j^2 dx = 1 is unit-free, so psi in 1/sqrt(um) is psi_internal * sqrt(um / L0).
  const double to_um = std::sqrt(d.um);
  for (Eigen::Index k = 0; k < s.states.cols(); ++k) {
    CsvColumn psi{"psi_" + std::to_string(k), {}};
    for (Eigen::Index j = 0; j < s.states.rows(); ++j) psi.values.push_back(s.states(j, k) * to_um);
    t.columns.push_back(std::move(psi));
  }
  t.comments = {
      "trapwork spectrum: eigenstates of " + (scenario.title.empty() ? scenario.file : scenario.title),
      "x in um; psi_n in 1/sqrt(um), real, normalised on the grid: sum_j psi_n(x_j)^2 dx = 1 with dx = " +
          number_text(d.length(s.grid.spacing())) + " um",
      std::string("grid: ") + grid_text(s.grid, d) +
          (s.grid.boundary() == Boundary::hard_wall ? " (interior points; psi = 0 at the walls)" : ""),
  };
  return t;
}

nlohmann::ordered_json spectrum_summary(const Scenario& scenario, const SpectrumResult& result) {
  using json = nlohmann::ordered_json;
  const Display d = display(scenario);
  const UnitSystem& u = scenario.units;
  const Spectrum& s = result.spectrum;
  json levels = json::array();
  for (std::size_t n = 0; n < result.levels.size(); ++n) {
    const Level& l = result.levels[n];
    levels.push_back({{"level", n},
                      {"energy", d.energy(l.energy)},
                      {"energy_internal", l.energy},
                      {"spacing", d.energy(l.spacing)},
                      {"mean_x", d.length(l.mean_x)},
                      {"rms_width", d.length(rms_width(l))},
                      {"harmonic_shift", d.energy(l.harmonic_shift)},
                      {"bound", l.bound},
                      {"group", l.group},
                      {"residual", d.energy(l.residual)},
                      {"edge_amplitude", l.edge_amplitude},
                      {"convergence", d.energy(convergence_of(result, n))}});
  }
  const auto& c = result.convergence;
  const auto& h = result.harmonic;
  json box = nullptr;
  if (scenario.spectrum.box)
    box = {{"left", d.length(scenario.spectrum.box->first)},
           {"right", d.length(scenario.spectrum.box->second)}};
  return {
      {"command", "trapwork spectrum"},
      {"scenario",
       {{"file", scenario.file}, {"title", scenario.title}, {"description", scenario.description}}},
      {"units", units_json(scenario)},
      {"potential", potential_json(scenario)},
      {"box", box},
      {"grid", grid_json(s.grid, d)},
      {"method", s.method},
      {"iterations", s.iterations},
      {"levels_requested", scenario.spectrum.options.levels},
      {"converged", s.converged},
      {"residual_tolerance", d.energy(result.spectrum.residual_tolerance)},
      {"degeneracy_tolerance", d.energy(scenario.spectrum.options.degeneracy_tolerance)},
      {"convergence",
       {{"done", c.done},
        {"finer_grid", c.done ? grid_json(c.finer, d) : json(nullptr)},
        {"max_energy_change", c.done ? json(d.energy(c.max_energy_change)) : json(nullptr)}}},
      {"threshold", d.energy(result.threshold)},  // null (JSON has no infinity) for a confining potential
      {"finite_depth", result.finite_depth},
      {"energy_cutoff", d.energy(result.energy_cutoff)},
      {"harmonic_approximation",
       {{"x_min", d.length(h.x_min)},
        {"v_min", d.energy(h.v_min)},
        {"frequency_Hz", conversion_rounded(u.to_si(h.omega, Dimension::frequency()))},
        {"omega_internal", h.omega}}},
      {"warnings", result.warnings},
      {"levels", levels},
  };
}

std::vector<fs::path> write_spectrum_outputs(const fs::path& folder, const Scenario& scenario,
                                             const SpectrumResult& result) {
  return write_outputs(folder, spectrum_tables(scenario, result), "summary.json", spectrum_summary(scenario, result),
                       {}, {});
}

void print_spectrum_report(std::ostream& out, const Scenario& scenario, const SpectrumResult& result) {
  const Display d = display(scenario);
  const Spectrum& s = result.spectrum;
  const UnitSystem& u = scenario.units;
  auto row = [&](const std::string& label, const std::string& text) { print_row(out, label, text); };
  print_scenario_header(out, "spectrum", scenario);
  row("grid", grid_text(s.grid, d));
  row("method",
      s.method + ", " + std::to_string(s.iterations) + " iterations, " + std::to_string(s.converged) +
          " of " + std::to_string(s.energies.size()) + " levels converged (residual below " +
          short_number(d.energy(result.spectrum.residual_tolerance), 3) + " " + d.e + ")");
  const auto& c = result.convergence;
  row("convergence", c.done ? "finer grid of " + std::to_string(c.finer.size()) + " points: max |dE| = " +
                                  short_number(d.energy(c.max_energy_change), 3) + " " + d.e
                            : std::string("not checked"));
  const auto& h = result.harmonic;
  row("harmonic", h.omega > 0 ? "f = " + short_number(u.to_si(h.omega, Dimension::frequency())) +
                                    " Hz about the minimum at x = " + short_number(d.length(h.x_min)) +
                                    " um, V_min = " + short_number(d.energy(h.v_min)) + " " + d.e
                              : std::string("no curvature at the minimum"));
  row("threshold", result.finite_depth ? short_number(d.energy(result.threshold)) + " " + d.e +
                                             " (levels above it are not bound)"
                                       : std::string("none (confining)"));
  out << '\n';
  char line[256];
  const std::string e = "[" + d.e + "]";
  std::snprintf(line, sizeof line, "%4s %18s %16s %14s %14s %11s %11s %5s %9s\n", "n", ("E " + e).c_str(),
                "E - E(n=0)", "spacing", "shift vs harm.", "<x> [um]", "width [um]", "bound", "residual");
  out << line;
  const double e0 = result.levels.empty() ? 0 : result.levels.front().energy;
  for (std::size_t n = 0; n < result.levels.size(); ++n) {
    const Level& l = result.levels[n];
    std::snprintf(
        line, sizeof line, "%4zu %18s %16s %14s %14s %11s %11s %5s %9s%s\n", n,
        short_number(d.energy(l.energy), 12).c_str(), short_number(d.energy(l.energy - e0), 10).c_str(),
        short_number(d.energy(l.spacing), 8).c_str(), short_number(d.energy(l.harmonic_shift), 6).c_str(),
        short_number(d.length(l.mean_x), 4).c_str(), short_number(d.length(rms_width(l)), 4).c_str(),
        l.bound ? "yes" : "no", short_number(d.energy(l.residual), 2).c_str(),
        (n > 0 && result.levels[n - 1].group == l.group) ? "  (degenerate with n-1)" : "");
    out << line;
  }
  if (!result.warnings.empty()) {
    out << "\nwarnings:\n";
    for (const auto& w : result.warnings) out << "  - " << w << '\n';
  }
}

}  // namespace trapwork
