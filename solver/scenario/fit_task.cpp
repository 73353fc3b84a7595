// `trapwork fit` as a task (see tasks.hpp): polynomial trap coefficients from measured transition
// frequencies (solver/fit.hpp), written back as a scenario file.
#include <toml++/toml.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/fit.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

namespace {

namespace fs = std::filesystem;

constexpr TrapCoefficient all_coefficients[] = {
    TrapCoefficient::frequency, TrapCoefficient::cubic,  TrapCoefficient::quartic, TrapCoefficient::quintic,
    TrapCoefficient::sextic,    TrapCoefficient::septic, TrapCoefficient::octic};

// "frequency,quartic" -> the coefficients; "quadratic" is the harmonic frequency.
std::vector<TrapCoefficient> parse_terms(const std::string& text) {
  std::vector<std::string> names = {"quadratic"};
  for (auto c : all_coefficients) names.emplace_back(coefficient_name(c));
  const std::string expected =
      "a comma-separated list of frequency (or quadratic), cubic, quartic, quintic, sextic, septic, octic";
  std::vector<TrapCoefficient> out;
  std::stringstream in(text);
  for (std::string word; std::getline(in, word, ',');) {
    while (!word.empty() && word.front() == ' ') word.erase(word.begin());
    while (!word.empty() && word.back() == ' ') word.pop_back();
    std::optional<TrapCoefficient> c;
    if (word == "quadratic") c = TrapCoefficient::frequency;
    for (auto a : all_coefficients)
      if (word == coefficient_name(a)) c = a;
    if (!c) throw InputError("--terms", word, expected, closest_name(word, names));
    if (std::find(out.begin(), out.end(), *c) != out.end())
      throw InputError("--terms", word, "each coefficient once (quadratic is the frequency)");
    out.push_back(*c);
  }
  if (out.empty()) throw InputError("--terms", text, expected);
  return out;
}

// The one polynomial or harmonic term of the start scenario.
const TermRecord& trap_term(const Scenario& s) {
  if (s.terms.size() != 1 || (s.terms[0].shape != "polynomial" && s.terms[0].shape != "harmonic"))
    throw InputError("potential", "", "a start scenario whose potential is one polynomial or harmonic term", "",
                     s.file);
  return s.terms[0];
}

PolynomialTrap start_trap(const Scenario& s) {
  const TermRecord& term = trap_term(s);
  PolynomialTrap t;
  t.omega = s.potential.parameter(term.name + ".frequency");
  if (term.shape == "polynomial")
    for (int p = 3; p <= 8; ++p) {
      const auto c = TrapCoefficient(p);
      t.set(c, s.potential.parameter(term.name + "." + std::string(coefficient_name(c))));
    }
  return t;
}

// Lab units of the printed and written coefficients: MHz for the frequency, h*Hz/nm^p for k_p.
struct LabValue {
  double per_internal;  // lab value of one internal unit
  std::string unit;
};
LabValue lab_unit(const Scenario& s, TrapCoefficient c) {
  if (c == TrapCoefficient::frequency) return {1 / (2 * si::pi * s.units.time_s() * 1e6), "MHz"};
  const int p = int(c);
  return {s.units.to_si(1.0, Dimension::energy_per_length(p)) * std::pow(1e-9, p) / si::planck_h,
          "h*Hz/nm^" + std::to_string(p)};
}

// "1.00012(3)"-style text as "1.000123 +- 3.1e-06": the value to the uncertainty's second digit.
std::string with_uncertainty(double v, double e) {
  if (!(e > 0) || !std::isfinite(e)) return short_number(v, 8);
  const int digits = std::clamp(int(std::floor(std::log10(std::abs(v) > 0 ? std::abs(v) : e)) -
                                    std::floor(std::log10(e))) + 2, 2, 15);
  return short_number(v, digits) + " +- " + short_number(e, 2);
}

// The lines in internal units; each line's linear term is the start trap's own `linear` (c1, a
// static tilt the fit keeps fixed and fitted.toml keeps) plus the line's linear_coefficient.
std::vector<TransitionDatum> internal_data(const TransitionLinesData& d, const Scenario& s) {
  const double force_si = s.units.to_si(1.0, Dimension::energy_per_length(1));  // N per internal force
  const TermRecord& term = trap_term(s);
  const double tilt = term.shape == "polynomial" ? s.potential.parameter(term.name + ".linear") : 0.0;
  std::vector<TransitionDatum> out;
  for (const auto& m : d.transitions)
    out.push_back({m.lower, m.upper, m.frequency_Hz * s.units.time_s(), m.uncertainty_Hz * s.units.time_s(),
                   tilt + m.force_N / force_si});
  return out;
}

// The start scenario's TOML with the fitted coefficients written into its trap term, its title
// marked, its [output] table dropped (the fitted scenario writes to "<its stem>-output").
std::string fitted_scenario_text(const std::string& text, const Scenario& start, const TrapFit& fit,
                                 const std::string& data_file) {
  toml::table root = toml::parse(text, start.file);
  const TermRecord& term = trap_term(start);
  toml::table* trap = nullptr;
  if (auto* terms = root["potential"].as_array())
    for (auto& node : *terms)
      if (auto* t = node.as_table(); t && t->get("name") && t->get("name")->value<std::string>() == term.name)
        trap = t;
  if (!trap) throw PhysicsError(start.file + ": cannot find the [[potential]] table of term '" + term.name + "'");
  bool anharmonic = false;
  for (auto c : all_coefficients) {
    const double v = fit.trap.get(c);
    if (c != TrapCoefficient::frequency && v == 0 && !trap->contains(coefficient_name(c))) continue;
    anharmonic = anharmonic || c != TrapCoefficient::frequency;
    const LabValue u = lab_unit(start, c);
    trap->insert_or_assign(coefficient_name(c), number_text(v * u.per_internal) + " " + u.unit);
  }
  if (anharmonic) trap->insert_or_assign("shape", "polynomial");
  root.erase("output");
  const std::string title = root["title"].value_or(std::string("trap"));
  root.insert_or_assign("title", "fitted to " + fs::path(data_file).filename().string() + ": " + title);

  std::ostringstream out;
  out << "# Scenario written by `trapwork fit` from " << data_file << " (" << fit.model_frequency.size()
      << " transitions), starting from " << start.file << ".\n";
  out << "# Fitted (+- stated uncertainty, from the data's uncertainties; chi^2 = " << short_number(fit.chi_square, 4)
      << " for " << fit.degrees_of_freedom << " degrees of freedom):\n";
  for (std::size_t q = 0; q < fit.free.size(); ++q) {
    const LabValue u = lab_unit(start, fit.free[q]);
    out << "#   " << coefficient_name(fit.free[q]) << " = "
        << with_uncertainty(fit.value(Eigen::Index(q)) * u.per_internal,
                            fit.uncertainty(Eigen::Index(q)) * std::abs(u.per_internal))
        << " " << u.unit << '\n';
  }
  out << "# The other keys are those of the start scenario.\n\n" << toml::toml_formatter(root) << '\n';
  return out.str();
}

CsvTable fit_lines_table(const Scenario& s, const TransitionLinesData& d, const TrapFit& fit) {
  const double force_unit = si::planck_h / 1e-9;  // N per h*Hz/nm
  CsvTable t;
  t.columns = {{"line", {}},           {"lower", {}},          {"upper", {}},
               {"linear_coefficient_h_Hz/nm", {}},  {"frequency_kHz", {}},  {"uncertainty_kHz", {}},
               {"model_frequency_kHz", {}}, {"difference_Hz", {}}, {"residual_sigma", {}}};
  const double to_Hz = 1 / s.units.time_s();
  for (std::size_t i = 0; i < d.transitions.size(); ++i) {
    const auto& m = d.transitions[i];
    const double model_Hz = fit.model_frequency[i] * to_Hz;
    const std::vector<double> row = {double(m.line), double(m.lower), double(m.upper), m.force_N / force_unit,
                                     m.frequency_Hz / 1e3, m.uncertainty_Hz / 1e3, model_Hz / 1e3,
                                     m.frequency_Hz - model_Hz, fit.residual[i]};
    for (std::size_t c = 0; c < row.size(); ++c) t.columns[c].values.push_back(row[c]);
  }
  t.comments = {"measured transitions of " + d.info.file + " and the fitted model (`trapwork fit`)",
                "line: line in the data file; lower, upper: level indices; linear_coefficient: F of the term F x added to the "
                "trap (V + F x; the physical force is -F)",
                "difference = measured - model; residual_sigma = difference / uncertainty"};
  return t;
}

nlohmann::ordered_json fit_summary(const Scenario& s, const TransitionLinesData& d, const TrapFit& fit) {
  using json = nlohmann::ordered_json;
  json coefficients = json::array();
  for (std::size_t q = 0; q < fit.free.size(); ++q) {
    const LabValue u = lab_unit(s, fit.free[q]);
    const auto i = Eigen::Index(q);
    coefficients.push_back({{"name", coefficient_name(fit.free[q])},
                            {"unit", u.unit},
                            {"value", fit.value(i) * u.per_internal},
                            {"uncertainty", fit.uncertainty(i) * std::abs(u.per_internal)},
                            {"scaled_uncertainty", fit.scaled_uncertainty(i) * std::abs(u.per_internal)},
                            {"value_internal", fit.value(i)},
                            {"uncertainty_internal", fit.uncertainty(i)}});
  }
  json correlation = json::array();
  for (Eigen::Index i = 0; i < fit.correlation.rows(); ++i) {
    json row = json::array();
    for (Eigen::Index j = 0; j < fit.correlation.cols(); ++j) row.push_back(fit.correlation(i, j));
    correlation.push_back(row);
  }
  auto finite_or_null = [](double v) { return std::isfinite(v) ? json(v) : json(nullptr); };
  return {{"command", "fit"},
          {"data", d.info.file},
          {"start", s.file},
          {"transitions", d.info.rows},
          {"skipped_rows", d.info.skipped_rows},
          {"coefficients", coefficients},
          {"correlation", correlation},
          {"chi_square", fit.chi_square},
          {"degrees_of_freedom", fit.degrees_of_freedom},
          {"p_value", finite_or_null(fit.p_value)},
          {"independent_data", fit.independent_data},
          {"iterations", fit.iterations},
          {"status", fit.status},
          {"basis_size", fit.basis_size},
          {"basis_change_internal", fit.basis_change},
          {"units", units_json(s)}};
}

}  // namespace

void print_task_report(std::ostream& out, const FitOutcome& o) {
  const Scenario& s = o.start;
  const TransitionLinesData& d = o.data;
  const TrapFit& fit = o.fit;
  print_scenario_header(out, "fit", s);
  print_row(out, "data", d.info.file + ": " + std::to_string(d.info.rows) + " transitions" +
                             (d.info.skipped_rows ? ", " + std::to_string(d.info.skipped_rows) +
                                                        " row(s) skipped (keep = 0)"
                                                  : std::string()));
  print_row(out, "method", "Levenberg-Marquardt, " + std::to_string(fit.iterations) + " iterations (" + fit.status +
                               "), Hermite basis of " + std::to_string(fit.basis_size) + " states");
  print_row(out, "chi-square", short_number(fit.chi_square, 5) + " for " + std::to_string(fit.degrees_of_freedom) +
                                   " degrees of freedom, p = " + short_number(fit.p_value, 3));
  out << "\n  fitted coefficients (+- from the stated uncertainties; [scaled by sqrt(chi^2/dof)])\n";
  char line[240];
  for (std::size_t q = 0; q < fit.free.size(); ++q) {
    const LabValue u = lab_unit(s, fit.free[q]);
    const auto i = Eigen::Index(q);
    const double scale = std::abs(u.per_internal);
    std::snprintf(line, sizeof line, "  %-10s %-34s %-14s [+- %s]\n", std::string(coefficient_name(fit.free[q])).c_str(),
                  with_uncertainty(fit.value(i) * u.per_internal, fit.uncertainty(i) * scale).c_str(), u.unit.c_str(),
                  short_number(fit.scaled_uncertainty(i) * scale, 2).c_str());
    out << line;
  }
  out << "\n  correlation\n  " << std::string(10, ' ');
  for (auto c : fit.free) {
    std::snprintf(line, sizeof line, " %9s", std::string(coefficient_name(c)).c_str());
    out << line;
  }
  out << '\n';
  for (Eigen::Index i = 0; i < fit.correlation.rows(); ++i) {
    std::snprintf(line, sizeof line, "  %-10s", std::string(coefficient_name(fit.free[std::size_t(i)])).c_str());
    out << line;
    for (Eigen::Index j = 0; j < fit.correlation.cols(); ++j) {
      std::snprintf(line, sizeof line, " %9.4f", fit.correlation(i, j));
      out << line;
    }
    out << '\n';
  }
  std::snprintf(line, sizeof line, "\n  %5s %6s %14s %16s %16s %12s %9s\n", "line", "levels", "F [h*Hz/nm]",
                "measured [kHz]", "model [kHz]", "diff. [Hz]", "residual");
  out << line;
  const double to_Hz = 1 / s.units.time_s();
  for (std::size_t k = 0; k < d.transitions.size(); ++k) {
    const auto& m = d.transitions[k];
    const double model_Hz = fit.model_frequency[k] * to_Hz;
    std::snprintf(line, sizeof line, "  %5d %6s %14s %16s %16s %12s %9s\n", m.line,
                  (std::to_string(m.lower) + "-" + std::to_string(m.upper)).c_str(),
                  short_number(m.force_N / (si::planck_h / 1e-9), 5).c_str(),
                  short_number(m.frequency_Hz / 1e3, 10).c_str(), short_number(model_Hz / 1e3, 10).c_str(),
                  short_number(m.frequency_Hz - model_Hz, 4).c_str(), short_number(fit.residual[k], 3).c_str());
    out << line;
  }
}


std::string fit_start_text(const std::string& mass, const std::string& frequency) {
  if (mass.empty() || frequency.empty())
    throw InputError("--start", "", "a start scenario (--start FILE), or both --mass and --frequency");
  return "title = \"polynomial trap, " + mass + " particle\"\n\n[particle]\nmass = \"" + mass +
         "\"\n\n[units]\nreference_frequency = \"" + frequency +
         "\"\nenergy = \"h*kHz\"\n\n[[potential]]\nname = \"trap\"\nshape = \"polynomial\"\nfrequency = \"" +
         frequency + "\"\n\n[spectrum]\nmethod = \"hermite\"\n";
}

FitOutcome fit_task(const FitSettings& settings, const std::function<void(const Scenario& start)>& checked) {
  FitOutcome o;
  o.data = read_transition_lines(settings.data);
  o.start_text = settings.start_text;
  o.start = read_scenario_text(o.start_text, settings.start_name);
  o.start.invocation = settings.invocation;
  o.start.changed_values = settings.changed_values;
  const PolynomialTrap trap = start_trap(o.start);
  const std::vector<TrapCoefficient> free = parse_terms(settings.terms);
  if (checked) checked(o.start);
  try {
    o.fit = fit_trap(internal_data(o.data, o.start), trap, free);
  } catch (const PhysicsError& e) {
    throw PhysicsError("fit of " + settings.data + ": " + e.what());
  }
  o.fitted_text = fitted_scenario_text(o.start_text, o.start, o.fit, settings.data);
  // The fitted scenario must read back before any file is written.
  (void)read_scenario_text(o.fitted_text, settings.fitted_name);
  return o;
}

std::vector<std::string> fit_output_names() { return {"fitted.toml", "fit_lines.csv", "fit_summary.json"}; }
std::vector<NamedTable> task_tables(const FitOutcome& o) { return {{"fit_lines.csv", fit_lines_table(o.start, o.data, o.fit)}}; }
nlohmann::ordered_json task_summary(const FitOutcome& o) {
  return with_provenance(fit_summary(o.start, o.data, o.fit), o.start);
}
std::vector<NamedText> task_texts(const FitOutcome& o) { return {{"fitted.toml", o.fitted_text}}; }
std::vector<NamedFigure> task_figures(const FitOutcome&) { return {}; }
std::vector<fs::path> write_task_outputs(const fs::path& folder, const FitOutcome& o) {
  const auto tables = task_tables(o);
  const auto summary = task_summary(o);
  const auto texts = task_texts(o);
  // fitted.toml first, as the command line reports it
  std::vector<fs::path> files = write_outputs(folder, {}, "", {}, texts, task_figures(o));
  for (const auto& p : write_outputs(folder, tables, "fit_summary.json", summary, {}, {})) files.push_back(p);
  return files;
}

}  // namespace trapwork
