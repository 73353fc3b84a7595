// The calibration's uncertainty carried into work runs (uncertainty_task.hpp).
#include "solver/scenario/uncertainty_task.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <filesystem>
#include <limits>
#include <sstream>

#include "solver/cost.hpp"
#include "solver/design.hpp"
#include "solver/errors.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

namespace {

namespace fs = std::filesystem;
using json = nlohmann::ordered_json;
constexpr double nan = std::numeric_limits<double>::quiet_NaN();

// 1-based line of the first occurrence of `needle` at or after line `from` (0 if absent).
int line_of(const std::string& text, const std::string& needle, int from = 1) {
  int line = 1;
  std::size_t start = 0;
  while (line < from && (start = text.find('\n', start)) != std::string::npos) ++start, ++line;
  if (start == std::string::npos) return 0;
  const std::size_t at = text.find(needle, start);
  if (at == std::string::npos) return 0;
  return line + int(std::count(text.begin() + std::ptrdiff_t(start), text.begin() + std::ptrdiff_t(at), '\n'));
}

const ParameterSlot* slot_of(const Scenario& s, const std::string& address) {
  for (const auto& p : s.parameters)
    if (p.address == address) return &p;
  return nullptr;
}

// The term holding every coefficient named (as design's --robust-fit finds it).
std::string term_of(const Scenario& s, const std::vector<std::string>& names, const std::string& file, int line) {
  std::vector<std::string> candidates;
  const auto addresses = s.potential.parameter_addresses();
  for (const auto& t : s.potential.terms())
    if (std::all_of(names.begin(), names.end(), [&](const std::string& n) {
          return n.find('.') != std::string::npos ||
                 std::find(addresses.begin(), addresses.end(), t.name() + "." + n) != addresses.end();
        }))
      candidates.push_back(t.name());
  if (candidates.size() != 1) {
    std::string list;
    for (const auto& n : names) list += (list.empty() ? "" : ", ") + n;
    throw InputError("coefficients", list,
                     "coefficients of one term of " + s.file + "'s potential (" + std::to_string(candidates.size()) +
                         " terms hold them all)",
                     "", file, line);
  }
  return candidates.front();
}

}  // namespace

Calibration read_calibration(const std::string& path, const Scenario& s, const std::string& given_term) {
  Calibration c;
  c.file = fs::is_directory(path) ? (fs::path(path) / "fit_summary.json").string() : path;
  const std::string text = read_text_file(c.file, "the calibration (fit_summary.json of trapwork fit)");
  json fit;
  try {
    fit = json::parse(text);
  } catch (const json::parse_error& e) {
    const int line = 1 + int(std::count(text.begin(), text.begin() + std::ptrdiff_t(std::min(e.byte, text.size())), '\n'));
    throw InputError("", "", std::string("JSON of a fit_summary.json (") + e.what() + ")", "", c.file, line);
  }
  const std::string expected = "a fit_summary.json of trapwork fit (command \"fit\", coefficients, correlation)";
  if (!fit.is_object() || !fit.contains("coefficients") || !fit["coefficients"].is_array() ||
      !fit.contains("correlation") || !fit["correlation"].is_array())
    throw InputError(fit.is_object() && !fit.contains("coefficients") ? "coefficients" : "correlation", "missing",
                     expected, "", c.file, 1);
  const json& coefficients = fit["coefficients"];
  const std::size_t n = coefficients.size();
  if (n == 0) throw InputError("coefficients", "[]", "at least one fitted coefficient", "", c.file, line_of(text, "\"coefficients\""));
  std::vector<std::string> names;
  std::vector<double> values;
  std::vector<int> lines;
  int from = line_of(text, "\"coefficients\"");
  for (std::size_t i = 0; i < n; ++i) {
    const json& k = coefficients[i];
    const std::string key = "coefficients[" + std::to_string(i) + "]";
    auto field = [&](const char* name) -> const json& {
      if (!k.is_object() || !k.contains(name))
        throw InputError(key + "." + name, "missing", "name, unit, value and uncertainty of each coefficient", "",
                         c.file, from);
      return k[name];
    };
    if (!field("name").is_string() || !field("unit").is_string() || !field("value").is_number() ||
        !field("uncertainty").is_number())
      throw InputError(key, k.dump(), "name and unit as text, value and uncertainty as numbers", "", c.file, from);
    names.push_back(k["name"].get<std::string>());
    lines.push_back(line_of(text, "\"" + names.back() + "\"", from));
    if (lines.back() > 0) from = lines.back();
    c.units.push_back(k["unit"].get<std::string>());
    values.push_back(k["value"].get<double>());
    c.lab_sd.push_back(k["uncertainty"].get<double>());
    if (!(c.lab_sd.back() > 0) || !std::isfinite(c.lab_sd.back()))
      throw InputError(key + ".uncertainty", short_number(c.lab_sd.back()),
                       "a standard uncertainty > 0 (a fixed coefficient is left out of the fit's list)", "", c.file,
                       line_of(text, "\"uncertainty\"", std::max(from, 1)));
  }
  const std::string term = given_term.empty() ? term_of(s, names, c.file, line_of(text, "\"coefficients\"")) : given_term;
  std::vector<std::string> known;
  for (const auto& p : s.parameters) known.push_back(p.address);
  for (std::size_t i = 0; i < n; ++i) {
    const std::string key = "coefficients[" + std::to_string(i) + "].name";
    const std::string address = names[i].find('.') != std::string::npos ? names[i] : term + "." + names[i];
    const ParameterSlot* slot = slot_of(s, address);
    if (!slot)
      throw InputError(key, names[i], "a parameter of " + s.file + "'s potential", closest_name(address, known), c.file,
                       lines[i]);
    if (s.protocol)
      for (const auto& change : s.protocol->changes)
        if (change.parameter == address)
          throw InputError(key, names[i],
                           "a parameter the protocol holds fixed (" + s.file + " changes " + address +
                               "; its schedule's uncertainty is not propagated)",
                           "", c.file, lines[i]);
    if (std::find(c.addresses.begin(), c.addresses.end(), address) != c.addresses.end())
      throw InputError(key, names[i], "each coefficient once", "", c.file, lines[i]);
    c.addresses.push_back(address);
    double per = 0;
    try {
      per = slot->dimension == Dimension::none() ? slot->plain_factor
                                                 : s.units.to_internal(parse_quantity("1 " + c.units[i]), slot->dimension,
                                                                       address, "1 " + c.units[i]);
    } catch (const InputError& e) {
      throw InputError("coefficients[" + std::to_string(i) + "].unit", c.units[i],
                       std::string("a unit of ") + address + " (" + e.what() + ")", "", c.file, lines[i]);
    }
    c.per_unit.push_back(per);
  }
  // The correlation matrix: n x n, symmetric, unit diagonal, |r| <= 1, positive semi-definite.
  const json& r = fit["correlation"];
  const int rline = line_of(text, "\"correlation\"");
  c.correlation = Eigen::MatrixXd::Zero(Eigen::Index(n), Eigen::Index(n));
  if (r.size() != n)
    throw InputError("correlation", std::to_string(r.size()) + " rows",
                     std::to_string(n) + " rows of " + std::to_string(n) + " numbers (one per coefficient)", "", c.file,
                     rline);
  for (std::size_t i = 0; i < n; ++i) {
    if (!r[i].is_array() || r[i].size() != n)
      throw InputError("correlation[" + std::to_string(i) + "]", r[i].dump(), std::to_string(n) + " numbers", "",
                       c.file, rline);
    for (std::size_t j = 0; j < n; ++j) {
      if (!r[i][j].is_number())
        throw InputError("correlation[" + std::to_string(i) + "][" + std::to_string(j) + "]", r[i][j].dump(),
                         "a number", "", c.file, rline);
      c.correlation(Eigen::Index(i), Eigen::Index(j)) = r[i][j].get<double>();
    }
  }
  for (Eigen::Index i = 0; i < c.correlation.rows(); ++i)
    for (Eigen::Index j = 0; j < c.correlation.cols(); ++j) {
      const double v = c.correlation(i, j);
      const std::string key = "correlation[" + std::to_string(i) + "][" + std::to_string(j) + "]";
      if (!std::isfinite(v) || std::abs(v) > 1 + 1e-12 || (i == j && std::abs(v - 1) > 1e-9) ||
          std::abs(v - c.correlation(j, i)) > 1e-9)
        throw InputError(key, short_number(v),
                         i == j ? "1 on the diagonal" : "a correlation in [-1, 1], equal to " +
                                                            ("correlation[" + std::to_string(j) + "][" + std::to_string(i) + "]"),
                         "", c.file, rline);
    }
  const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eigen(c.correlation);
  if (eigen.eigenvalues().minCoeff() < -1e-9)
    throw InputError("correlation", "a smallest eigenvalue " + short_number(eigen.eigenvalues().minCoeff(), 3),
                     "a positive semi-definite correlation matrix (a covariance)", "", c.file, rline);
  c.mean.resize(Eigen::Index(n));
  c.fitted.resize(Eigen::Index(n));
  c.covariance.resize(Eigen::Index(n), Eigen::Index(n));
  for (std::size_t i = 0; i < n; ++i) {
    const auto a = Eigen::Index(i);
    c.mean(a) = s.potential.parameter(c.addresses[i]);
    c.fitted(a) = values[i] * c.per_unit[i];
    const double sd_i = c.lab_sd[i] * std::abs(c.per_unit[i]);
    for (std::size_t j = 0; j < n; ++j)
      c.covariance(a, Eigen::Index(j)) = c.correlation(a, Eigen::Index(j)) * sd_i * c.lab_sd[j] * std::abs(c.per_unit[j]);
    const double fitted = values[i] * c.per_unit[i];
    if (std::abs(fitted - c.mean(a)) > 0.1 * sd_i)
      c.notes.push_back(c.addresses[i] + ": the scenario's value differs from the fit's " + short_number(values[i], 10) +
                        " " + c.units[i] + " by " + short_number((c.mean(a) - fitted) / sd_i, 3) +
                        " standard deviations; the spread is taken about the scenario's value");
  }
  return c;
}

Calibration scenario_calibration(const Scenario& s) {
  TRAPWORK_EXPECT(s.uncertainty.has_value(), "scenario_calibration: a scenario with [uncertainty]");
  const UncertaintySpec& u = *s.uncertainty;
  Calibration c;
  c.file = s.file + " [uncertainty]";
  c.addresses = u.addresses;
  c.units = u.units;
  c.lab_sd = u.lab_sd;
  const auto n = Eigen::Index(u.addresses.size());
  c.mean.resize(n);
  c.covariance.resize(n, n);
  c.correlation.resize(n, n);
  for (Eigen::Index i = 0; i < n; ++i) {
    const auto a = std::size_t(i);
    c.per_unit.push_back(u.sd[a] / u.lab_sd[a]);
    c.mean(i) = s.potential.parameter(u.addresses[a]);
    for (Eigen::Index j = 0; j < n; ++j) {
      c.correlation(i, j) = u.correlation[a][std::size_t(j)];
      c.covariance(i, j) = c.correlation(i, j) * u.sd[a] * u.sd[std::size_t(j)];
    }
  }
  c.fitted = c.mean;
  return c;
}

bool has_calibration(const Scenario& s, const UncertaintySettings& settings) {
  if (settings.calibration == "none") return false;
  return !settings.calibration.empty() || s.uncertainty.has_value();
}

Calibration calibration_of(const Scenario& s, const UncertaintySettings& settings) {
  TRAPWORK_EXPECT(has_calibration(s, settings), "calibration_of: a run with a calibration");
  if (!settings.calibration.empty() && s.uncertainty)
    throw InputError("--uncertainty", settings.calibration,
                     "one statement of the trap's calibration: " + s.file + " has an [uncertainty] table (line " +
                         std::to_string(s.uncertainty->line) +
                         "); remove it to use the fit's covariance, or leave out --uncertainty to use the table");
  return settings.calibration.empty() ? scenario_calibration(s) : read_calibration(settings.calibration, s);
}

namespace {

// The request of the perturbed runs: the nominal run's grid, steps and levels, no checks.
WorkRequest perturbed_request(const ScenarioWork& nominal, const TaskHooks& hooks) {
  const WorkResult& r = nominal.result();
  WorkRequest q = nominal.request;
  q.reverse_run = false;
  q.time_step_check = false;
  q.grid_check = false;
  q.trace_points = 0;
  q.spectrum.convergence_check = false;
  if (!q.spectrum.box) q.spectrum.extent = std::make_pair(r.grid.left(), r.grid.right());
  q.spectrum.points = r.grid.size();
  q.steps = r.steps;
  q.min_initial_levels = std::max(q.min_initial_levels, int(r.forward.initial_weights.size()));
  q.spectrum.options.interrupt = hooks.interrupt;
  return q;
}

double matching_probability(const std::vector<WorkLine>& lines, const WorkLine& line, double gap) {
  for (const auto& l : lines)
    if (l.initial == line.initial && l.final == line.final) return l.probability;
  const WorkLine* nearest = nullptr;
  for (const auto& l : lines)
    if (!nearest || std::abs(l.work - line.work) < std::abs(nearest->work - line.work)) nearest = &l;
  return nearest && std::abs(nearest->work - line.work) < 0.25 * gap ? nearest->probability : nan;
}

std::string line_name(const WorkLine& l) {
  return "P(" + std::to_string(l.initial) + "->" + std::to_string(l.final) + ")";
}

}  // namespace

void check_uncertainty_settings(const UncertaintySettings& settings) {
  if (settings.method != "auto" && settings.method != "linear" && settings.method != "sampling" &&
      settings.method != "both")
    throw InputError("--uncertainty-method", settings.method, "auto, linear, sampling or both");
  if (settings.samples < 2 && settings.method != "linear")
    throw InputError("--uncertainty-samples", std::to_string(settings.samples), "at least 2 parameter sets");
  if (!(settings.step_in_sd > 0) || !(settings.step_in_sd <= 5))
    throw InputError("--uncertainty-step", short_number(settings.step_in_sd), "a step in (0, 5] standard deviations");
}

namespace {
// The estimated arithmetic of one perturbed run (perturbed_request: the forward run on the
// nominal grid and steps, no checks) with its two spectra (spectrum_cost's estimate).
double perturbed_run_arithmetic(const WorkResult& r) {
  double spectra = 0;
  for (const Spectrum* s : {&r.initial_spectrum, &r.final_spectrum}) {
    const int levels = int(s->energies.size());
    const bool hermite = s->method.rfind("Hermite", 0) == 0;
    const std::size_t size = hermite ? std::size_t(hermite_basis_size(levels)) : s->grid.size();
    spectra += spectrum_cost(size, levels, hermite || s->method.rfind("dense", 0) == 0).operations;
  }
  return run_arithmetic(r) / (r.reverse ? 2 : 1) + spectra;
}
}  // namespace

WorkUncertainty work_uncertainty(const Scenario& s, const ScenarioWork& nominal, const UncertaintySettings& settings,
                                 const TaskHooks& hooks) {
  check_uncertainty_settings(settings);
  const std::string source = settings.calibration.empty() ? s.file + " [uncertainty]" : settings.calibration;
  if (nominal.walls) throw InputError("--uncertainty", source, "a trap without moving walls (not supported yet)");
  if (s.noise)
    throw InputError("--uncertainty", source, "a scenario without [" + s.noise->table() + "] (not supported yet)");
  WorkUncertainty u;
  u.settings = settings;
  u.calibration = calibration_of(s, settings);
  for (const auto& n : u.calibration.notes) u.warnings.push_back(n);
  const WorkDistribution& d = nominal.result().distribution;

  // The strong lines: P >= strong_line_probability, at most strong_lines_at_most, by work.
  u.lines = d.lines;
  std::stable_sort(u.lines.begin(), u.lines.end(),
                   [](const WorkLine& a, const WorkLine& b) { return a.probability > b.probability; });
  std::size_t kept = 0;
  while (kept < u.lines.size() && kept < std::size_t(strong_lines_at_most) &&
         u.lines[kept].probability >= strong_line_probability)
    ++kept;
  u.lines.resize(kept);
  std::sort(u.lines.begin(), u.lines.end(), [](const WorkLine& a, const WorkLine& b) { return a.work < b.work; });
  u.results = {{"<W>", true, d.mean}, {"sd(W)", true, std::sqrt(d.variance)}, {"Delta F", true, d.free_energy_change}};
  for (const auto& l : u.lines) u.results.push_back({line_name(l), false, l.probability});
  const Eigen::Index m = Eigen::Index(u.results.size());

  // A merged line (equal spacings) is named by its first pair, which may differ between runs:
  // unmatched by its levels, a line is matched by work within a quarter of its gap to the
  // nominal run's neighbouring lines.
  std::vector<double> gaps;
  for (const auto& l : u.lines) {
    double gap = std::numeric_limits<double>::infinity();
    for (const auto& o : d.lines)
      if (o.initial != l.initial || o.final != l.final) gap = std::min(gap, std::abs(o.work - l.work));
    gaps.push_back(gap);
  }
  const double energy_scale = std::isfinite(lowest_spacing(nominal.result())) ? lowest_spacing(nominal.result())
                                                                               : std::abs(d.mean) + std::sqrt(d.variance);
  const WorkRequest request = perturbed_request(nominal, hooks);
  const auto& addresses = u.calibration.addresses;
  int planned = 0, done = 0;
  const auto start = std::chrono::steady_clock::now();
  const ResultFunction f = [&](const Eigen::VectorXd& p) {
    Scenario perturbed = s;
    for (std::size_t i = 0; i < addresses.size(); ++i) perturbed.potential.set_parameter(addresses[i], p(Eigen::Index(i)));
    Eigen::VectorXd out = Eigen::VectorXd::Constant(m, nan);
    WorkRequest q = request;
    if (hooks.progress && planned > 0)
      q.progress = [&](double fraction) { hooks.progress((done + fraction) / planned); };
    try {
      const ScenarioWork w = compute_work(perturbed, q);
      const WorkDistribution& r = w.result().distribution;
      out(0) = r.mean;
      out(1) = std::sqrt(r.variance);
      out(2) = r.free_energy_change;
      for (std::size_t k = 0; k < u.lines.size(); ++k) out(Eigen::Index(3 + k)) = matching_probability(r.lines, u.lines[k], gaps[k]);
    } catch (const PhysicsError& e) {
      if (u.warnings.size() < 20) u.warnings.push_back("a perturbed run failed (its results left out): " + std::string(e.what()));
    }
    ++done;
    ++u.runs;
    return out;
  };
  const Eigen::Index axes = Eigen::Index(addresses.size());
  LinearOptions lin;
  lin.step_in_sd = settings.step_in_sd;
  lin.floor_scale = Eigen::VectorXd::Constant(m, energy_scale);  // energies: 1e-10 of the lowest spacing
  for (Eigen::Index i = 3; i < m; ++i) lin.floor_scale(i) = 1;      // probabilities: an absolute floor of 1e-10
  for (Eigen::Index i = 0; i < m; ++i)
    u.results[std::size_t(i)].floor = lin.floor * (std::abs(u.results[std::size_t(i)].value) + lin.floor_scale(i));
  auto run_linear = [&] {
    if (hooks.stage) hooks.stage("calibration uncertainty: linear propagation (" + std::to_string(2 * axes + 1) + " runs)");
    planned = int(2 * axes + 1), done = 0;
    u.linear = linear_spread(f, u.calibration.mean, u.calibration.covariance, lin);
  };
  auto run_sampling = [&] {
    if (hooks.stage) hooks.stage("calibration uncertainty: sampling (" + std::to_string(settings.samples) + " runs)");
    planned = settings.samples, done = 0;
    u.sampled = sampled_spread(f, u.calibration.mean, u.calibration.covariance, settings.samples, settings.seed);
  };
  auto worst = [&]() {  // the result whose second-order terms are largest against its sd
    Eigen::Index at = 0;
    for (Eigen::Index i = 0; i < m; ++i)
      if (std::isfinite(u.linear->nominal(i)) &&
          (!(u.linear->nonlinearity(i) <= u.linear->nonlinearity(at)) || !std::isfinite(u.linear->nominal(at))))
        at = i;
    return at;
  };
  const std::string limit = short_number(lin.linear_tolerance, 2);
  if (settings.method == "sampling") {
    run_sampling();
    u.method = "sampling";
    u.reason = "asked for (--uncertainty-method sampling)";
  } else {
    run_linear();
    const Eigen::Index w = worst();
    const std::string second = "second-order terms at most " + short_number(u.linear->nonlinearity(w), 2) +
                               " of the linear sd (" + u.results[std::size_t(w)].name + "; limit " + limit + ")";
    if (settings.method == "linear") {
      u.method = "linear";
      u.reason = "asked for (--uncertainty-method linear); " + second;
      if (!u.linear->accurate)
        u.warnings.push_back("the linear propagation is not accurate here: " + second +
                             "; --uncertainty-method sampling draws the parameters instead");
    } else if (settings.method == "both" || !u.linear->accurate) {
      run_sampling();
      u.agreement = compare_spreads(*u.linear, *u.sampled);
      u.method = u.linear->accurate ? "linear" : "sampling";
      u.reason = settings.method == "both" ? "both asked for (--uncertainty-method both); the linear result is " +
                                                 std::string(u.linear->accurate ? "used: " : "not used: ") + second
                                           : "sampling, because the linear propagation is not accurate: " + second;
    } else {
      u.method = "linear";
      u.reason = "linear: " + second;
      const double estimate = u.check_estimate = settings.samples * perturbed_run_arithmetic(nominal.result());
      const std::string cost = std::to_string(settings.samples) + " runs of about " +
                               short_number(estimate / settings.samples, 2) + " operations";
      if (estimate <= settings.check_operations) {
        run_sampling();
        u.agreement = compare_spreads(*u.linear, *u.sampled);
        u.reason += "; checked against sampling (a small case: " + cost + ")";
      } else {
        u.reason += "; not checked against sampling (" + cost + ", more than " +
                    short_number(settings.check_operations, 2) + "; --uncertainty-method both runs it)";
      }
    }
  }
  u.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  const Eigen::VectorXd& sd = u.method == "linear" ? u.linear->sd : u.sampled->sd;
  for (Eigen::Index i = 0; i < m; ++i)
    u.results[std::size_t(i)].sd = std::isfinite(u.results[std::size_t(i)].value) ? sd(i) : nan;
  if (u.agreement) {  // results whose spreads are both at the rounding floor are not compared
    u.agreement->largest_in_standard_errors = 0;
    for (Eigen::Index i = 0; i < m; ++i) {
      const double floor = u.results[std::size_t(i)].floor;
      if (!(u.linear->sd(i) > floor) && !(u.sampled->sd(i) > floor))
        u.agreement->in_standard_errors(i) = u.agreement->relative(i) = nan;
      else if (std::isfinite(u.agreement->in_standard_errors(i)))
        u.agreement->largest_in_standard_errors =
            std::max(u.agreement->largest_in_standard_errors, std::abs(u.agreement->in_standard_errors(i)));
    }
  }
  if (u.agreement && u.agreement->largest_in_standard_errors > 3)
    u.warnings.push_back("linear and sampled standard deviations differ by up to " +
                         short_number(u.agreement->largest_in_standard_errors, 3) +
                         " standard errors of the sampled one");
  return u;
}

void add_work_uncertainty(WorkOutcome& o, const UncertaintySettings& settings, const TaskHooks& hooks) {
  if (!has_calibration(o.scenario, settings)) return;
  const WorkRun run = o.run();
  const ScenarioWork& nominal = o.choice ? *o.choice->work : *o.direct;
  o.uncertainty = work_uncertainty(run.scenario, nominal, settings, hooks);
}

// ---- outputs ---------------------------------------------------------------------------------

namespace {
double per_display(const Display& d, const SpreadResult& r) { return r.energy ? d.energy_per : 1.0; }
json number_or_null(double v) { return std::isfinite(v) ? json(v) : json(nullptr); }
}  // namespace

CsvTable uncertainty_lines_table(const Scenario& s, const WorkUncertainty& u) {
  const Display d = display(s);
  CsvTable t;
  t.columns = {{"work" + d.e_col, {}},        {"probability", {}},         {"probability_sd", {}},
               {"probability_sd_linear", {}}, {"probability_sd_sampled", {}}, {"probability_sampled_mean", {}},
               {"initial", {}},               {"final", {}}};
  for (std::size_t k = 0; k < u.lines.size(); ++k) {
    const std::size_t i = 3 + k;
    const std::vector<double> row = {
        d.energy(u.lines[k].work),
        u.lines[k].probability,
        u.results[i].sd,
        u.linear ? u.linear->sd(Eigen::Index(i)) : nan,
        u.sampled ? u.sampled->sd(Eigen::Index(i)) : nan,
        u.sampled ? u.sampled->mean(Eigen::Index(i)) : nan,
        double(u.lines[k].initial),
        double(u.lines[k].final)};
    for (std::size_t c = 0; c < row.size(); ++c) t.columns[c].values.push_back(row[c]);
  }
  t.comments = {"trapwork work, calibration " + u.calibration.file +
                    ": the strong work lines (P >= " + short_number(strong_line_probability) +
                    ") with the standard deviation the trap's calibration gives them",
                "probability_sd: of the method used (" + u.method + "); the _linear and _sampled columns: each method's "
                "(nan: not run)"};
  for (std::size_t i = 0; i < 3; ++i) {
    const SpreadResult& r = u.results[i];
    const double per = per_display(d, r);
    t.comments.push_back(r.name + " = " + (std::isfinite(r.value) ? short_number(r.value / per, 10) : "-") + " +- " +
                         (std::isfinite(r.sd) ? short_number(r.sd / per, 3) : "not computed") + " " + d.e);
  }
  return t;
}

json uncertainty_summary(const Scenario& s, const WorkUncertainty& u) {
  const Display d = display(s);
  const Calibration& c = u.calibration;
  json parameters = json::array();
  for (std::size_t i = 0; i < c.addresses.size(); ++i)
    parameters.push_back({{"address", c.addresses[i]},
                          {"unit", c.units[i]},
                          {"value", c.mean(Eigen::Index(i)) / c.per_unit[i]},
                          {"sd", c.lab_sd[i]}});
  json correlation = json::array();
  for (Eigen::Index i = 0; i < c.correlation.rows(); ++i) {
    json row = json::array();
    for (Eigen::Index j = 0; j < c.correlation.cols(); ++j) row.push_back(c.correlation(i, j));
    correlation.push_back(row);
  }
  json results = json::array();
  for (std::size_t i = 0; i < u.results.size(); ++i) {
    const SpreadResult& r = u.results[i];
    const double per = per_display(d, r);
    json o = {{"name", r.name},
              {"unit", r.energy ? d.e : std::string("1")},
              {"value", number_or_null(r.value / per)},
              {"sd", number_or_null(r.sd / per)},
              {"sd_at_rounding_floor", std::isfinite(r.sd) && !(r.sd > r.floor)},
              {"sd_linear", number_or_null(u.linear ? u.linear->sd(Eigen::Index(i)) / per : nan)},
              {"second_order_sd", number_or_null(u.linear ? u.linear->curvature_sd(Eigen::Index(i)) / per : nan)},
              {"sd_sampled", number_or_null(u.sampled ? u.sampled->sd(Eigen::Index(i)) / per : nan)},
              {"sd_sampled_standard_error", number_or_null(u.sampled ? u.sampled->sd_error(Eigen::Index(i)) / per : nan)},
              {"sampled_mean", number_or_null(u.sampled ? u.sampled->mean(Eigen::Index(i)) / per : nan)},
              {"linear_minus_sampled_in_standard_errors",
               number_or_null(u.agreement ? u.agreement->in_standard_errors(Eigen::Index(i)) : nan)}};
    if (i >= 3) {
      o["initial"] = u.lines[i - 3].initial;
      o["final"] = u.lines[i - 3].final;
      o["work" + d.e_col] = d.energy(u.lines[i - 3].work);
    }
    results.push_back(o);
  }
  json j = {{"file", c.file},
            {"parameters", parameters},
            {"correlation", correlation},
            {"method", u.method},
            {"reason", u.reason},
            {"linear_runs", u.linear ? json(u.linear->runs) : json(nullptr)},
            {"step_in_sd", u.linear ? json(u.settings.step_in_sd) : json(nullptr)},
            {"samples", u.sampled ? json(u.sampled->samples) : json(nullptr)},
            {"seed", u.sampled ? json(u.sampled->seed) : json(nullptr)},
            {"largest_disagreement_in_standard_errors",
             u.agreement ? json(u.agreement->largest_in_standard_errors) : json(nullptr)},
            {"runs", u.runs},
            {"results", results},
            {"warnings", u.warnings}};
  return j;
}

void add_uncertainty_bars(WorkFigure& f, const Scenario& s, const WorkDistribution& dist, const WorkUncertainty& u) {
  f.result.error.assign(dist.lines.size(), nan);  // NaN: not computed, no bar
  f.result.error_name = "sd (calibration)";
  f.result.error_as_band = true;  // light boxes where visible, counted in the caption (plot.hpp)
  for (std::size_t l = 0; l < dist.lines.size(); ++l)
    for (std::size_t k = 0; k < u.lines.size(); ++k)
      if (dist.lines[l].initial == u.lines[k].initial && dist.lines[l].final == u.lines[k].final)
        f.result.error[l] = u.results[3 + k].sd;
  const Display d = display(s);
  auto pm = [&](std::size_t i) {
    const SpreadResult& r = u.results[i];
    return std::isfinite(r.sd) ? short_number(r.value / d.energy_per, 6) + " +- " + short_number(r.sd / d.energy_per, 2) + " " + d.e
                               : std::string("not computed");
  };
  f.notes.push_back("sd due to the trap's calibration (" + u.method + ", P >= " + short_number(strong_line_probability) +
                    ", each in lines_uncertainty.csv): <W> = " + pm(0) + ", sd(W) = " + pm(1));
}

void print_uncertainty_report(std::ostream& out, const Scenario& s, const WorkUncertainty& u) {
  const Display d = display(s);
  const Calibration& c = u.calibration;
  out << "\nspread due to the trap's calibration\n";
  print_row(out, "calibration", c.file);
  for (std::size_t i = 0; i < c.addresses.size(); ++i)
    print_row(out, i == 0 ? "parameters" : "",
              c.addresses[i] + " = " + short_number(c.mean(Eigen::Index(i)) / c.per_unit[i], 10) + " +- " +
                  short_number(c.lab_sd[i], 3) + " " + c.units[i]);
  if (c.addresses.size() > 1) {
    std::string corr;
    for (Eigen::Index i = 0; i < c.correlation.rows(); ++i)
      for (Eigen::Index j = i + 1; j < c.correlation.cols(); ++j)
        corr += (corr.empty() ? "" : ", ") + std::string("r(") + std::to_string(i + 1) + "," + std::to_string(j + 1) +
                ") = " + short_number(c.correlation(i, j), 4);
    print_row(out, "correlation", corr);
  }
  std::string how = u.method;
  if (u.method == "linear" || u.linear)
    how = u.linear ? "linear: " + std::to_string(u.linear->runs) + " runs, central differences of " +
                         short_number(u.settings.step_in_sd, 2) + " sd along each principal axis"
                   : how;
  print_row(out, "method", how);
  if (u.sampled)
    print_row(out, "", "sampling: " + std::to_string(u.sampled->samples) + " parameter sets from the covariance, seed " +
                           std::to_string(u.sampled->seed));
  print_row(out, "used", u.method + " (" + u.reason + ")");
  print_row(out, "runs", std::to_string(u.runs) + " work runs on the nominal grid and steps, " +
                             short_number(u.seconds, 3) + " s");
  char line[256];
  std::snprintf(line, sizeof line, "\n  %-12s %18s %12s %12s %12s %10s\n", "result", "value", "sd", "sd linear",
                "sd sampled", "lin-samp");
  out << line;
  auto text = [](double v, int digits) { return std::isfinite(v) ? short_number(v, digits) : std::string("not computed"); };
  for (std::size_t i = 0; i < u.results.size(); ++i) {
    const SpreadResult& r = u.results[i];
    const double per = per_display(d, r);
    const std::string unit = r.energy ? " " + d.e : "";
    if (!std::isfinite(r.value)) {
      std::snprintf(line, sizeof line, "  %-12s %s\n", r.name.c_str(),
                    i == 2 ? "does not exist (no Gibbs initial state)" : "not computed");
      out << line;
      continue;
    }
    const double lin = u.linear ? u.linear->sd(Eigen::Index(i)) / per : nan;
    const double samp = u.sampled ? u.sampled->sd(Eigen::Index(i)) / per : nan;
    const double agree = u.agreement ? u.agreement->in_standard_errors(Eigen::Index(i)) : nan;
    const std::string sd_text = std::isfinite(r.sd) && !(r.sd > r.floor)
                                    ? "< " + short_number(r.floor / per, 1) + " (rounding)"
                                    : text(r.sd / per, 3);
    std::snprintf(line, sizeof line, "  %-12s %18s %12s %12s %12s %10s%s\n", r.name.c_str(),
                  short_number(r.value / per, 10).c_str(), sd_text.c_str(),
                  u.linear ? text(lin, 3).c_str() : "not run", u.sampled ? text(samp, 3).c_str() : "not run",
                  u.agreement ? (std::isfinite(agree) ? short_number(agree, 2) + " se" : std::string("-")).c_str() : "",
                  unit.c_str());
    out << line;
  }
  if (u.agreement)
    print_row(out, "check", "linear against sampled sd: largest difference " +
                                short_number(u.agreement->largest_in_standard_errors, 3) +
                                " standard errors of the sampled sd (lin-samp column)");
  print_row(out, "lines", "lines_uncertainty.csv: the strong lines with their sd (P >= " +
                              short_number(strong_line_probability) + ")");
  for (const auto& w : u.warnings) print_row(out, "WARN", w);
}

// ---- compare -----------------------------------------------------------------------------------

CalibratedLikelihood calibrated_likelihood(const WorkRun& main_run, const WorkData& data, double sigma,
                                           const ModelChoiceSettings& models, const UncertaintySettings& settings,
                                           const TaskHooks& hooks) {
  if (settings.samples < 2) throw InputError("--uncertainty-samples", std::to_string(settings.samples), "at least 2 draws");
  CalibratedLikelihood c;
  c.samples = settings.samples;
  c.seed = settings.seed;
  std::vector<const Scenario*> scenarios{&main_run.scenario};
  for (const auto& s : models.against) scenarios.push_back(&s);
  const Calibration main_calibration = calibration_of(main_run.scenario, settings);  // errors: the user's
  c.file = main_calibration.file;
  c.notes = main_calibration.notes;
  ModelChoiceSettings quiet;  // likelihoods only: no synthetic sets
  quiet.calibration = 0;
  for (std::size_t j = 0; j < scenarios.size(); ++j) {
    const Scenario& model = *scenarios[j];
    c.names.push_back(fs::path(model.file).stem().string());
    std::optional<Calibration> cal;
    try {
      // With a fit's file every model is tried against it; without, each model carries its own
      // [uncertainty] table (or none: not folded).
      if (j == 0)
        cal = main_calibration;
      else if (!settings.calibration.empty() && model.uncertainty)
        c.not_folded.push_back("it has an [uncertainty] table (line " + std::to_string(model.uncertainty->line) +
                               ") besides the fit's file: two statements of one calibration");
      else if (!settings.calibration.empty())
        cal = read_calibration(settings.calibration, model);
      else if (model.uncertainty)
        cal = scenario_calibration(model);
      else
        c.not_folded.push_back("it has no [uncertainty] table");
      if (j > 0 && cal && !cal->notes.empty()) {  // another model than the one calibrated: not its spread
        c.not_folded.push_back("the calibration describes other values (" + cal->notes.front() + ")");
        cal.reset();
      }
    } catch (const InputError& e) {
      c.not_folded.push_back(std::string("its potential does not take the calibration: ") + e.what());
    }
    std::optional<ScenarioWork> own;
    if (j > 0) own = model_work(model, hooks, "compare --against");
    const WorkRun run = j == 0 ? main_run : own->run(model);
    quiet.against.clear();
    if (cal) {
      c.not_folded.push_back("");
      std::vector<std::vector<double>> cov(std::size_t(cal->mean.size()), std::vector<double>(std::size_t(cal->mean.size())));
      for (Eigen::Index a = 0; a < cal->mean.size(); ++a)
        for (Eigen::Index b = 0; b < cal->mean.size(); ++b) cov[std::size_t(a)][std::size_t(b)] = cal->covariance(a, b);
      const auto draws = gaussian_samples(std::vector<double>(cal->mean.data(), cal->mean.data() + cal->mean.size()), cov,
                                          settings.samples, settings.seed);
      for (const auto& p : draws) {
        Scenario drawn = model;
        for (std::size_t i = 0; i < p.size(); ++i) drawn.potential.set_parameter(cal->addresses[i], p[i]);
        quiet.against.push_back(std::move(drawn));
      }
    } else {
      quiet.against.push_back(model);  // choose_between needs two models: the nominal one again
    }
    if (hooks.stage) hooks.stage("calibration folded into " + c.names.back() + " (" + std::to_string(quiet.against.size()) + " runs)");
    const ModelChoiceOutcome o = choose_between(run, data, sigma, quiet, hooks);
    const double shift = o.choice.runs * o.display_shift;
    const auto& ll = o.choice.log_likelihood;
    c.nominal.push_back(ll[0] + shift);
    if (!cal) {
      c.marginal.push_back(ll[0] + shift);
      c.spread.push_back(nan);
      continue;
    }
    double top = -std::numeric_limits<double>::infinity(), sum = 0, squares = 0;
    for (std::size_t k = 1; k < ll.size(); ++k) top = std::max(top, ll[k]);
    for (std::size_t k = 1; k < ll.size(); ++k) sum += std::exp(ll[k] - top), squares += ll[k];
    const double n = double(ll.size() - 1), mean_ll = squares / n;
    double var = 0;
    for (std::size_t k = 1; k < ll.size(); ++k) var += (ll[k] - mean_ll) * (ll[k] - mean_ll);
    c.marginal.push_back(std::isfinite(top) ? top + std::log(sum / n) + shift : top);
    c.spread.push_back(std::sqrt(var / (n - 1)));
  }
  std::vector<double> prior = models.prior.empty() ? std::vector<double>(scenarios.size(), 1.0) : models.prior;
  double top = -std::numeric_limits<double>::infinity(), total = 0;
  for (double m : c.marginal) top = std::max(top, m);
  for (std::size_t j = 0; j < c.marginal.size(); ++j) total += prior[j] * std::exp(c.marginal[j] - top);
  for (std::size_t j = 0; j < c.marginal.size(); ++j) c.posterior.push_back(prior[j] * std::exp(c.marginal[j] - top) / total);
  return c;
}

json calibrated_likelihood_json(const CalibratedLikelihood& c) {
  json models = json::array();
  for (std::size_t j = 0; j < c.names.size(); ++j)
    models.push_back({{"model", c.names[j]},
                      {"log_likelihood_nominal", number_or_null(c.nominal[j])},
                      {"log_likelihood_marginal", c.not_folded[j].empty() ? number_or_null(c.marginal[j]) : json(nullptr)},
                      {"log_likelihood_sd_over_draws", number_or_null(c.spread[j])},
                      {"posterior", number_or_null(c.posterior[j])},
                      {"not_folded", c.not_folded[j].empty() ? json(nullptr) : json(c.not_folded[j])}});
  return {{"file", c.file},
          {"method", "marginal likelihood: ln of the mean of L over draws of the trap's parameters from the calibration"},
          {"draws", c.samples},
          {"seed", c.seed},
          {"models", models},
          {"warnings", c.notes}};
}

void print_calibrated_likelihood(std::ostream& out, const CalibratedLikelihood& c) {
  out << "\nthe trap's calibration folded in (" << c.file << ")\n";
  print_row(out, "method", "ln L averaged over " + std::to_string(c.samples) + " draws of the trap's parameters (seed " +
                               std::to_string(c.seed) + "): ln mean_k L_k, a marginal likelihood");
  char line[256];
  std::snprintf(line, sizeof line, "  %-22s %16s %16s %12s %10s\n", "model", "ln L nominal", "ln L marginal",
                "sd over draws", "posterior");
  out << line;
  for (std::size_t j = 0; j < c.names.size(); ++j) {
    const bool folded = c.not_folded[j].empty();
    std::snprintf(line, sizeof line, "  %-22s %16s %16s %12s %10s\n", c.names[j].c_str(),
                  short_number(c.nominal[j], 8).c_str(), folded ? short_number(c.marginal[j], 8).c_str() : "not folded",
                  folded ? short_number(c.spread[j], 3).c_str() : "not computed", short_number(c.posterior[j], 4).c_str());
    out << line;
  }
  for (const auto& n : c.notes) print_row(out, "WARN", n);
  for (std::size_t j = 0; j < c.names.size(); ++j)
    if (!c.not_folded[j].empty()) print_row(out, "note", c.names[j] + ": " + c.not_folded[j] + " (its nominal ln L is used)");
  if (c.names.size() > 1)
    print_row(out, "note", "posterior from the marginal likelihoods and the prior weights; the test's p-values above are "
                           "the nominal models'");
}

}  // namespace trapwork
