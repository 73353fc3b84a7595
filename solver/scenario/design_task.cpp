// The design task (design_task.hpp): solver/design.hpp on a scenario, and its files.
#include "solver/scenario/design_task.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>
#include <toml++/toml.h>

#include "solver/errors.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/uncertainty_task.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

namespace fs = std::filesystem;

namespace {
constexpr int table_rows = 2001;  // rows of each designed table (piecewise linear between them)

std::string exact_number(double x) {  // 17 digits: a formula that must round-trip
  char buffer[40];
  std::snprintf(buffer, sizeof buffer, "%.17g", x);
  return buffer;
}

std::string table_file(const std::string& address) {
  std::string name = address;
  std::replace(name.begin(), name.end(), '.', '_');
  return "designed_" + name + ".csv";
}

// Internal value of "1 <unit>" of dimension d.
double per_unit(const Scenario& s, const std::string& unit, Dimension d, const std::string& key) {
  return s.units.to_internal(parse_quantity("1 " + unit), d, key, unit);
}

// designed.toml: the scenario's text with each designed change read from its table; relative
// data files made absolute (designed.toml lives in the output folder); no [output] (its own
// default folder); frame "lab" for a translation, because the co-moving frame takes the trap's
// acceleration from the schedule and a piecewise-linear table has none between its rows.
std::string designed_scenario_text(const Scenario& s, const std::string& text, const std::vector<DesignTable>& tables,
                                   bool translation, const std::string& family,
                                   const std::optional<std::string>& duration) {
  toml::table root = toml::parse(text, s.file);
  const fs::path folder = s.file == "default" ? fs::current_path() : fs::absolute(fs::path(s.file)).parent_path();
  auto absolute_file = [&](toml::table& t) {
    if (auto* f = t.get_as<std::string>("file"); f && fs::path(f->get()).is_relative())
      t.insert_or_assign("file", (folder / f->get()).lexically_normal().string());
  };
  if (auto* potentials = root["potential"].as_array())
    for (auto& p : *potentials)
      if (auto* t = p.as_table()) absolute_file(*t);
  if (auto* noise = root["noise"].as_table())
    if (auto* sources = (*noise)["source"].as_array())
      for (auto& n : *sources)
        if (auto* t = n.as_table())
          if (auto* f = t->get_as<std::string>("psd_file"); f && fs::path(f->get()).is_relative())
            t->insert_or_assign("psd_file", (folder / f->get()).lexically_normal().string());
  root.erase("output");
  if (duration) root["protocol"].as_table()->insert_or_assign("duration", *duration);
  if (auto* changes = root["protocol"]["change"].as_array())
    for (auto& c : *changes) {
      auto* t = c.as_table();
      if (!t) continue;
      absolute_file(*t);
      const auto* parameter = t->get_as<std::string>("parameter");
      if (!parameter) continue;
      for (const auto& d : tables) {
        if (d.address != parameter->get()) continue;
        for (const char* key : {"ramp", "from", "to", "formula", "file", "time_unit", "value_unit"}) t->erase(key);
        if (!d.formula.empty()) {
          t->insert_or_assign("ramp", "formula");
          t->insert_or_assign("formula", d.formula);
        } else {
          t->insert_or_assign("ramp", "table");
          t->insert_or_assign("file", d.file);
        }
        t->insert_or_assign("time_unit", d.time_unit);
        if (!d.value_unit.empty()) t->insert_or_assign("value_unit", d.value_unit);
      }
    }
  if (translation) {
    if (!root["work"].as_table()) root.insert_or_assign("work", toml::table{});
    root["work"].as_table()->insert_or_assign("frame", "lab");
  }
  if (auto* title = root.get_as<std::string>("title")) title->get() += " (designed ramp)";
  std::ostringstream out;
  const bool wall = std::any_of(tables.begin(), tables.end(), [](const DesignTable& d) { return !d.formula.empty(); });
  const bool table = std::any_of(tables.begin(), tables.end(), [](const DesignTable& d) { return d.formula.empty(); });
  out << "# Made by `" << (s.invocation.empty() ? std::string("trapwork design") : s.invocation) << "` from "
      << s.file << ".\n# The designed ramp (" << family << ")";
  if (table) out << " is read from the table files beside this one";
  if (wall)
    out << (table ? ";\n# a" : "\n# for a") << " moving wall it is a formula ramp of t/tau: the wall route needs the wall's "
        << "acceleration,\n# which a table (piecewise linear) lacks. The designed_box_*.csv files tabulate it for plotting";
  out << ".\n";
  if (translation)
    out << "# frame = \"lab\": the co-moving frame would take the trap's acceleration from the table, which\n"
           "# has none between its rows (piecewise linear); the lab frame samples the potential itself.\n";
  out << root << '\n';
  return out.str();
}

// A duration in lab units ("0.3 us"), internal.
double duration_value(const Scenario& s, const std::string& text, const std::string& key) {
  const Quantity q = parse_quantity(text);
  if (q.plain) throw InputError(key, text, "a duration with its unit, e.g. \"0.3 us\"", "", s.file);
  return s.units.to_internal(q, Dimension::time(), key, text);
}

// The target of the duration search in internal units: plain for a probability or quanta, an
// energy with its unit for the dissipated work.
double target_value(const DesignTaskOutcome& o, const std::string& text) {
  const Quantity q = parse_quantity(text);
  if (o.settings.options.objective == DesignObjective::dissipated_work) {
    if (q.plain) throw InputError("target", text, "a dissipated work with its unit, e.g. \"0.1 h*kHz\"", "", o.scenario.file);
    return o.scenario.units.to_internal(q, Dimension::energy(), "target", text);
  }
  if (!q.plain) throw InputError("target", text, "a plain number (the objective is a probability or a number of quanta)", "", o.scenario.file);
  return q.value_si;
}

// The robust design's members: the nominal potential, the variants, the fit's samples.
std::vector<RobustMember> robust_members(const Scenario& s, const DesignSettings& settings) {
  std::vector<RobustMember> members;
  if (settings.robust_variants.empty() && settings.robust_fit.empty()) return members;
  members.push_back({"nominal", s.potential});
  auto set_value = [&](Potential& p, const std::string& address, const std::string& text, const std::string& key) {
    const auto slot = std::find_if(s.parameters.begin(), s.parameters.end(),
                                   [&](const ParameterSlot& q) { return q.address == address; });
    if (slot == s.parameters.end()) throw InputError(key, address, "a parameter of the scenario's potential", "", s.file);
    const Quantity q = parse_quantity(text);
    if (q.plain && !(slot->dimension == Dimension::none()))
      throw InputError(key, text, "a value with its unit for " + address, "", s.file);
    p.set_parameter(address, slot->dimension == Dimension::none() ? q.value_si * slot->plain_factor
                                                                   : s.units.to_internal(q, slot->dimension, key, text));
  };
  for (const auto& variant : settings.robust_variants) {
    RobustMember m{variant, s.potential};
    std::stringstream in(variant);
    for (std::string edit; std::getline(in, edit, ';');) {
      const auto eq = edit.find('=');
      if (eq == std::string::npos) throw InputError("robust", edit, "ADDRESS=VALUE (e.g. trap.quartic=0.012 h*Hz/nm^4)", "", s.file);
      std::string address = edit.substr(0, eq);
      address.erase(0, address.find_first_not_of(' '));
      address.erase(address.find_last_not_of(' ') + 1);
      set_value(m.potential, address, edit.substr(eq + 1), "robust");
    }
    members.push_back(std::move(m));
  }
  if (!settings.robust_fit.empty()) {
    if (settings.robust_samples < 1) throw InputError("robust_samples", std::to_string(settings.robust_samples), "at least 1 sample");
    Calibration c;
    try {  // the one reader of fit_summary.json (uncertainty_task.hpp); its message names the file's line and key
      c = read_calibration(settings.robust_fit, s, settings.robust_term);
    } catch (const InputError& e) {
      throw InputError("robust_fit", settings.robust_fit, std::string("a fit_summary.json of trapwork fit (") + e.what() + ")");
    }
    // Drawn about the fit's values (not the scenario's, should they differ), in internal units.
    std::vector<std::vector<double>> cov(c.addresses.size(), std::vector<double>(c.addresses.size()));
    for (std::size_t i = 0; i < cov.size(); ++i)
      for (std::size_t j = 0; j < cov.size(); ++j) cov[i][j] = c.covariance(Eigen::Index(i), Eigen::Index(j));
    const auto samples = gaussian_samples(std::vector<double>(c.fitted.data(), c.fitted.data() + c.fitted.size()), cov,
                                          settings.robust_samples, settings.options.seed);
    for (std::size_t k = 0; k < samples.size(); ++k) {
      RobustMember m{"fit sample " + std::to_string(k + 1) + ":", s.potential};
      for (std::size_t i = 0; i < c.addresses.size(); ++i) {
        m.potential.set_parameter(c.addresses[i], samples[k][i]);
        m.label += " " + c.addresses[i] + "=" + number_text(samples[k][i] / c.per_unit[i]) + " " + c.units[i];
      }
      members.push_back(std::move(m));
    }
  }
  return members;
}

// "trap.centre=0.5 m/s" or "0.5 m/s" (one designed parameter) -> address, quantity text.
std::pair<std::string, std::string> bound_text(const std::string& text, const DesignFamily& family,
                                               const std::string& key, const std::string& file) {
  const auto eq = text.find('=');
  if (eq != std::string::npos) return {text.substr(0, eq), text.substr(eq + 1)};
  if (family.parameters().size() != 1)
    throw InputError(key, text, "PARAMETER=VALUE (" + std::to_string(family.parameters().size()) +
                     " parameters are designed)", "", file);
  return {family.parameters().front().address, text};
}

// The lab-unit bounds of the settings in internal units (DesignBound per address).
std::vector<DesignBound> lab_bounds(const Scenario& s, const DesignSettings& settings, const DesignFamily& family) {
  std::vector<DesignBound> bounds;
  auto convert = [&](const std::string& text, const std::string& key, bool speed) {
    // named copies, not a structured binding: lambdas cannot capture those before C++20 (clang refuses)
    const auto bound = bound_text(text, family, key, s.file);
    const std::string address = bound.first, given = bound.second;
    const auto change = std::find_if(s.protocol->changes.begin(), s.protocol->changes.end(),
                                     [&](const ChangeSpec& c) { return c.parameter == address; });
    const auto& ps = family.parameters();
    if (change == s.protocol->changes.end() ||
        std::none_of(ps.begin(), ps.end(), [&](const DesignedParameter& d) { return d.address == address; }))
      throw InputError(key, address, "a designed parameter (a [[protocol.change]] whose end values differ)", "", s.file);
    const Quantity q = parse_quantity(given);
    if (q.plain) throw InputError(key, given, "a value with its unit, e.g. \"0.5 m/s\" or \"20 nm\"", "", s.file);
    const auto slot = std::find_if(s.parameters.begin(), s.parameters.end(),
                                   [&](const ParameterSlot& p) { return p.address == address; });
    const bool plain = slot != s.parameters.end() && slot->dimension == Dimension::none();
    Dimension d = plain ? Dimension::none() : change->dimension;
    if (speed) d.power[2] -= 1;
    const double value = s.units.to_internal(q, d, key, given) * (plain ? slot->plain_factor : 1);
    auto it = std::find_if(bounds.begin(), bounds.end(), [&](const DesignBound& b) { return b.address == address; });
    if (it == bounds.end()) it = bounds.insert(bounds.end(), DesignBound{address});
    (speed ? it->max_speed : it->max_overshoot) = value;
  };
  for (const auto& t : settings.max_speed) convert(t, "max_speed", true);
  for (const auto& t : settings.max_overshoot) convert(t, "max_overshoot", false);
  return bounds;
}
}  // namespace

namespace {
// The designed scenario as designed.toml describes it: each designed change a table of the
// designed values (internal, as written to the table files), the lab frame for a translation.
Scenario designed_scenario(const Scenario& s, const std::vector<DesignTable>& tables, bool translation) {
  Scenario d = s;
  for (auto& c : d.protocol->changes)
    for (const auto& t : tables)
      if (t.address == c.parameter && !t.formula.empty()) {  // a wall: designed.toml's formula ramp
        c.form = ScheduleForm::formula;
        c.ramp = "formula";
        c.times.clear();
        c.values.clear();
        c.file.clear();
        c.formula = t.formula;
        c.internal_formula = t.internal_formula;
        c.time_unit = t.time_unit;
        c.value_unit = t.value_unit;
      } else if (t.address == c.parameter) {
        c.form = ScheduleForm::table;
        c.ramp = "table";
        c.times = t.times;
        c.values = t.after;
        c.file = t.file;
        c.formula.clear();
        c.internal_formula.clear();
      }
  if (translation && d.work) d.work->frame = "lab";
  if (!d.title.empty()) d.title += " (designed ramp)";
  return d;
}

// Runs the scenario and the designed scenario through work_task (all checks) and compares the
// designed run's objective with the search's.
void final_runs(DesignTaskOutcome& o, bool translation, const TaskHooks& hooks) {
  TaskHooks quiet;
  quiet.interrupt = hooks.interrupt;
  if (hooks.stage) hooks.stage("final runs (smooth and designed ramp, with all checks)");
  o.before_run.emplace(work_task(o.scenario, std::nullopt, default_search_budget, quiet));
  o.after_run.emplace(work_task(designed_scenario(o.scenario, o.tables, translation), std::nullopt,
                                default_search_budget, quiet));
  const WorkRun after = o.after_run->run();
  o.final_objective = design_objective(after.result, o.settings.options.objective);
  // The search's value in the nominal scenario (a robust design's objective is a mean).
  const double searched = o.robust.empty() ? o.result.objective_after : o.robust.front().objective_after;
  const double scale = std::max(std::abs(searched), 1e-12);
  if (std::abs(o.final_objective - searched) > 1e-3 * scale)
    o.final_warnings.push_back("the designed scenario's run gives objective " + number_text(o.final_objective / o.objective_per_unit) +
                               ", the search's formula ramp " + number_text(searched / o.objective_per_unit) +
                               " (relative difference above 1e-3: a table's interpolation or the search's "
                               "cheaper numerics; trust designed.toml's run, whose checks follow)");
  for (const auto& c : work_checks(after))
    if (!c.pass())
      o.final_warnings.push_back("designed run: " + c.name + " " + number_text(c.value) + " above its tolerance " +
                                 number_text(c.tolerance) + " (designed_work_summary.json)");
}

// P(m -> n) of both runs with the harmonic prediction of each (same end potentials, so the same
// work value per (m, n)).
CsvTable work_lines_table(const DesignTaskOutcome& o) {
  const WorkRun before = o.before_run->run(), after = o.after_run->run();
  const Display d = display(o.scenario);
  const std::string e = column_unit(d.e);
  CsvTable t;
  t.columns = {{"initial", {}}, {"final", {}}, {"work_" + e, {}}, {"probability_smooth", {}},
               {"probability_designed", {}}, {"harmonic_smooth", {}, bool(before.result.harmonic)},
               {"harmonic_designed", {}, bool(after.result.harmonic)}};
  const WorkInput& a = after.result.forward;
  const WorkInput& b = before.result.forward;
  const int rows = std::min(a.transitions.initial_levels(), b.transitions.initial_levels());
  const int cols = std::min(a.transitions.final_levels(), b.transitions.final_levels());
  auto harmonic = [](const WorkResult& r, int m, int n) {
    if (!r.harmonic || m >= r.harmonic->reference.initial_levels() || n >= r.harmonic->reference.final_levels())
      return std::numeric_limits<double>::quiet_NaN();
    return r.harmonic->initial_weights.at(std::size_t(m)) * r.harmonic->reference.probability(m, n);
  };
  for (int m = 0; m < rows; ++m)
    for (int n = 0; n < cols; ++n) {
      const double pa = a.initial_weights[std::size_t(m)] * a.transitions.probability(m, n);
      const double pb = b.initial_weights[std::size_t(m)] * b.transitions.probability(m, n);
      const double ha = harmonic(after.result, m, n), hb = harmonic(before.result, m, n);
      if (!(std::max({pa, pb, std::isnan(ha) ? 0 : ha, std::isnan(hb) ? 0 : hb}) >= lines_file_probability_floor)) continue;
      const double w = after.result.final_spectrum.energies[n] - after.result.initial_spectrum.energies[m];
      t.columns[0].values.push_back(m);
      t.columns[1].values.push_back(n);
      t.columns[2].values.push_back(w / d.energy_per);
      t.columns[3].values.push_back(pb);
      t.columns[4].values.push_back(pa);
      t.columns[5].values.push_back(hb);
      t.columns[6].values.push_back(ha);
    }
  t.comments = {"work lines p_m P(m -> n) of the smooth ramp (the scenario as given) and of the designed ramp "
                "(designed.toml), each run by the work pipeline with its checks",
                "W = E_n(final) - E_m(initial) of the run's levels (the same end potentials for both); harmonic_*: "
                "the harmonic prediction by level index (" +
                    (after.result.harmonic ? after.result.harmonic->model : "none: " + after.result.harmonic_absent) +
                    "); rows below P = 1e-15 in all four left out"};
  return t;
}
}  // namespace

std::vector<std::string> design_output_names(const Scenario& scenario) {
  std::vector<std::string> names = {"design_history.csv", "design_summary.json",    "design_schedule.png",
                                    "design_schedule.svg", "design_convergence.png", "design_convergence.svg",
                                    "designed.toml",     "design_work_lines.csv",  "design_work_before.png",
                                    "design_work_before.svg", "design_work_after.png", "design_work_after.svg",
                                    "designed_work_summary.json"};
  if (scenario.protocol)
    for (const auto& c : scenario.protocol->changes) names.push_back(table_file(c.parameter));
  return names;
}

DesignTaskOutcome design_task(const Scenario& scenario, const DesignSettings& settings, const TaskHooks& hooks,
                              const std::function<void()>& checked) {
  if (!scenario.protocol) throw InputError("protocol", "", "a [protocol] whose ramp to design", "", scenario.file);
  if (scenario.noise) {
    const std::string t = scenario.noise->table();
    throw InputError(t, "[" + t + "]", "no [" + t + "]: the design runs the closed system (no noise or damping)",
                     "remove [" + t + "] (or design first, then add it to designed.toml)", scenario.file);
  }
  if (scenario.natural_units)
    throw InputError("units.natural", "true", "lab units: the designed table is written in the scenario's lab units",
                     "", scenario.file);
  // Moving walls: the family of the walls' and the inner potential's schedules, each member run
  // through the wall route (wall_evaluator); the designed wall ramp is written as a formula.
  const bool walls = moves_walls(scenario);
  const auto protocol_of = [walls](const Scenario& s) { return walls ? build_wall_protocol(s).as_protocol() : build_protocol(s); };
  const Protocol protocol = protocol_of(scenario);
  const DesignFamily family(protocol, settings.options.modes, settings.options.zero_end_acceleration);
  DesignSettings used = settings;
  used.options.bounds = lab_bounds(scenario, settings, family);
  used.options.message_units = scenario.spectrum.message_units;
  WorkRequest request = work_request(scenario);
  // The design must not depend on how its runs ran (one process, or robust members shared among
  // MPI ranks): FFTW_MEASURE may pick other transforms under another load, and so other last
  // digits, which the optimiser then follows.
  request.repeatable_transforms = true;
  if (settings.options.objective == DesignObjective::dissipated_work && !request.initial.is_gibbs())
    throw InputError("objective", "dissipated_work", "a thermal [initial] (temperature or mean_phonons) for the dissipated work, "
                     "or --objective excitation for this start", "", scenario.file);
  if (!(request.spectrum.options.memory_limit > 0)) request.spectrum.options.memory_limit = available_memory_bytes();
  request.spectrum.options.interrupt = hooks.interrupt;
  if (checked) checked();

  std::vector<RobustMember> robust = robust_members(scenario, settings);
  // Every work run counts against the bound: one per member of a robust design.
  used.options.runs_per_evaluation = std::max<int>(1, int(robust.size()));
  DesignTaskOutcome o;  // member by member: a brace list naming three would leave the rest unnamed (g++ -Wextra warns)
  o.scenario = scenario;
  o.settings = used;
  o.family = family.description();
  o.robust = std::move(robust);
  const auto evaluator_for = [&](const Potential& potential) -> DesignEvaluator {
    if (!walls) return work_evaluator(potential, request, settings.options.objective);
    const WallProtocol w = build_wall_protocol(scenario);
    return wall_evaluator(WallProtocol(w.duration(), w.left(), w.right(), potential, w.inner_schedules()),
                          wall_work_request(scenario, request), settings.options.objective);
  };
  DesignEvaluator evaluate = evaluator_for(scenario.potential);
  if (!o.robust.empty()) {
    std::vector<DesignEvaluator> members;
    for (const auto& m : o.robust) members.push_back(evaluator_for(m.potential));
    evaluate = averaged_evaluator(std::move(members), settings.member_sharing);
  }
  if (settings.options.objective == DesignObjective::dissipated_work) {
    const Display d = display(scenario);
    o.objective_unit = d.e;
    o.objective_per_unit = d.energy_per;
  }
  DesignHooks design_hooks;
  design_hooks.interrupt = hooks.interrupt;
  if (hooks.progress)
    design_hooks.progress = [&](const DesignEvaluation&, int done, int bound) { hooks.progress(double(done) / bound); };
  if (hooks.stage) hooks.stage(settings.target ? "design at each duration" : "design");
  try {
    if (settings.target) {  // the shortest duration meeting the target
      int done = 0;
      const int bound = (settings.bisections + 2) * used.options.max_evaluations;
      if (hooks.progress) design_hooks.progress = [&](const DesignEvaluation&, int, int) { hooks.progress(double(done += used.options.runs_per_evaluation) / bound); };
      const double tau = protocol.duration();
      const double shortest = settings.shortest.empty() ? tau / 4 : duration_value(scenario, settings.shortest, "shortest");
      o.duration_search = design_shortest_duration(protocol, evaluate, used.options, target_value(o, *settings.target),
                                                   shortest, settings.bisections, design_hooks);
      const auto& trials = o.duration_search->trials;
      const auto& chosen = trials.at(std::size_t(std::max(0, o.duration_search->best)));
      if (!chosen.ran || !chosen.feasible)  // nothing met and no design at the scenario's duration
        throw PhysicsError(o.duration_search->warnings.empty() ? std::string("no design at the scenario's duration")
                                                               : o.duration_search->warnings.front());
      o.result = chosen.design;
      o.result.warnings.insert(o.result.warnings.begin(), o.duration_search->warnings.begin(), o.duration_search->warnings.end());
      const std::string unit = duration_unit(scenario);
      o.scenario.protocol->duration = chosen.duration;
      char given[48];
      std::snprintf(given, sizeof given, "%.17g", chosen.duration / per_unit(scenario, unit, Dimension::time(), "protocol.duration"));
      o.scenario.protocol->duration_given = std::string(given) + " " + unit;
    } else {
      o.result = design_protocol(family, [&](const Protocol& p) { return evaluate(p); }, used.options, design_hooks);
    }
  } catch (const PhysicsError& e) {
    throw PhysicsError(scenario.file + ": " + e.what());
  }
  const Protocol at_protocol = protocol_of(o.scenario);
  const DesignFamily at_family(at_protocol, settings.options.modes, settings.options.zero_end_acceleration);

  const std::string time_unit = duration_unit(o.scenario);
  const double tau = at_protocol.duration();
  const std::vector<double> zero(o.result.amplitudes.size(), 0.0);
  for (std::size_t p = 0; p < at_family.parameters().size(); ++p) {
    const auto& d = at_family.parameters()[p];
    DesignTable t;
    t.address = d.address;
    t.file = table_file(d.address);
    t.time_unit = time_unit;
    t.time_per_unit = per_unit(o.scenario, time_unit, Dimension::time(), "protocol.duration");
    const auto change = std::find_if(o.scenario.protocol->changes.begin(), o.scenario.protocol->changes.end(),
                                     [&](const ChangeSpec& c) { return c.parameter == d.address; });
    const auto slot = std::find_if(o.scenario.parameters.begin(), o.scenario.parameters.end(),
                                   [&](const ParameterSlot& s) { return s.address == d.address; });
    if (slot != o.scenario.parameters.end() && slot->dimension == Dimension::none()) {
      t.value_per_unit = slot->plain_factor;
    } else {
      std::string given = change == o.scenario.protocol->changes.end() ? "" : change->to_given;
      given.erase(std::remove(given.begin(), given.end(), '"'), given.end());  // as written, with its quotes
      t.value_unit = unit_text(given);
      if (t.value_unit.empty() && change != o.scenario.protocol->changes.end()) t.value_unit = change->value_unit;
      if (t.value_unit.empty())
        throw InputError("protocol.change.to", change == o.scenario.protocol->changes.end() ? "" : change->to_given,
                         "an end value with its unit (the designed table is written in it)", "", o.scenario.file);
      t.value_per_unit = per_unit(o.scenario, t.value_unit, change->dimension, "protocol.change.to");
    }
    t.speed_before = at_family.max_speed(p, zero);
    t.speed_after = at_family.max_speed(p, o.result.amplitudes);
    t.overshoot_before = at_family.max_overshoot(p, zero);
    t.overshoot_after = at_family.max_overshoot(p, o.result.amplitudes);
    t.overshoot_limit = used.options.overshoot * std::abs(d.to - d.from);
    for (const auto& b : used.options.bounds)
      if (b.address == d.address) {
        t.speed_limit = std::min(t.speed_limit, b.max_speed);
        t.overshoot_limit = std::min(t.overshoot_limit, b.max_overshoot);
      }
    if (d.address == "box.left" || d.address == "box.right") {  // lab units as the reader takes them: value_unit, t and tau in time_unit
      const std::string shape = at_family.shape_expression(p, o.result.amplitudes);
      t.formula = "(" + exact_number(d.from / t.value_per_unit) + ")+(" + exact_number((d.to - d.from) / t.value_per_unit) +
                  ")*(" + shape + ")";
      t.internal_formula = "(" + exact_number(d.from) + ")+(" + exact_number(d.to - d.from) + ")*(" + shape + ")";
    }
    for (int i = 0; i < table_rows; ++i) {
      const double u = double(i) / (table_rows - 1);
      t.times.push_back(u * tau);
      t.before.push_back(at_family.value(p, zero, u));
      t.after.push_back(at_family.value(p, o.result.amplitudes, u));
    }
    o.tables.push_back(std::move(t));
  }
  {  // each member's objective, smooth ramp and design (2 runs each), by its owner process
    const auto objectives = shared_parts(settings.member_sharing, 0, o.robust.size(), 2, [&](std::size_t i) {
      const DesignEvaluator one = evaluator_for(o.robust[i].potential);
      return std::vector<double>{one(at_family.protocol(zero)), one(at_family.protocol(o.result.amplitudes))};
    });
    for (std::size_t i = 0; i < o.robust.size(); ++i) {
      o.robust[i].objective_before = objectives[i][0];
      o.robust[i].objective_after = objectives[i][1];
    }
  }
  const bool translation = !walls && at_protocol.translation(o.scenario.potential).has_value();
  o.designed_text = designed_scenario_text(o.scenario, settings.scenario_text, o.tables, translation, o.family,
                                           settings.target ? std::optional(o.scenario.protocol->duration_given) : std::nullopt);
  final_runs(o, translation, hooks);
  return o;
}

std::vector<NamedTable> task_tables(const DesignTaskOutcome& o) {
  const auto& h = o.result.history;
  const std::string unit = o.objective_unit.empty() ? "" : "_" + column_unit(o.objective_unit);
  CsvTable history;
  std::vector<CsvColumn> cols(5);
  cols[0].name = "evaluation";
  cols[1].name = "start";
  cols[2].name = design_objective_name(o.settings.options.objective) + unit;
  cols[3].name = "feasible";
  cols[4].name = "overshoot_excess";
  for (const auto& e : h) {
    cols[0].values.push_back(e.index);
    cols[1].values.push_back(e.start);
    cols[2].values.push_back(e.objective / o.objective_per_unit);
    cols[3].values.push_back(e.feasible ? 1 : 0);
    cols[4].values.push_back(e.excess);
  }
  for (std::size_t p = 0; p < o.result.parameters.size(); ++p)
    for (int k = 1; k <= o.result.modes; ++k) {
      CsvColumn c{"c_" + o.result.parameters[p].address + "_" + std::to_string(k), {}, true};
      for (const auto& e : h) c.values.push_back(e.amplitudes[p * o.result.modes + k - 1]);
      cols.push_back(std::move(c));
    }
  history.columns = std::move(cols);
  history.comments = {"every work run of the search in the order run; amplitudes c_k in units of the change (" +
                          o.family + ")",
                      "infeasible rows (overshoot) were not simulated: their objective is the search's penalty"};
  std::vector<NamedTable> tables = {{"design_history.csv", history}};
  if (o.before_run && o.after_run) tables.push_back({"design_work_lines.csv", work_lines_table(o)});
  return tables;
}

namespace {
std::vector<std::string> all_warnings(const DesignTaskOutcome& o) {
  std::vector<std::string> w = o.result.warnings;
  w.insert(w.end(), o.final_warnings.begin(), o.final_warnings.end());
  return w;
}

nlohmann::ordered_json robust_summary(const DesignTaskOutcome& o) {
  using json = nlohmann::ordered_json;
  if (o.robust.empty()) return nullptr;
  json members = json::array();
  for (const auto& m : o.robust)
    members.push_back({{"member", m.label},
                       {"objective_smooth", m.objective_before / o.objective_per_unit},
                       {"objective_designed", m.objective_after / o.objective_per_unit}});
  return {{"objective", "mean over the members, equally weighted (objective_before/after above are that mean)"},
          {"variants", o.settings.robust_variants},
          {"fit_summary", o.settings.robust_fit.empty() ? json(nullptr) : json(o.settings.robust_fit)},
          {"fit_samples", o.settings.robust_fit.empty() ? 0 : o.settings.robust_samples},
          {"seed", o.settings.options.seed},
          {"members", members}};
}

nlohmann::ordered_json duration_search_summary(const DesignTaskOutcome& o) {
  using json = nlohmann::ordered_json;
  if (!o.duration_search) return nullptr;
  const std::string unit = duration_unit(o.scenario);
  const double per = o.scenario.units.to_internal(parse_quantity("1 " + unit), Dimension::time());
  const auto& d = *o.duration_search;
  json trials = json::array();
  for (const auto& t : d.trials)
    trials.push_back({{"duration", t.duration / per},
                      {"met", t.met},
                      {"designed", t.ran},
                      {"feasible", t.ran ? json(t.feasible) : json(nullptr)},  // false: no member within the bounds
                      {"objective_after", t.ran && t.feasible ? json(t.design.objective_after / o.objective_per_unit) : json(nullptr)},
                      {"evaluations", t.ran ? t.design.history.size() : 0},
                      {"work_runs", t.ran ? t.design.work_runs : 0}});
  return {{"target", *o.settings.target},
          {"duration_unit", unit},
          {"bisections", o.settings.bisections},
          {"evaluation_bound", (o.settings.bisections + 2) * o.settings.options.max_evaluations},
          {"shortest_met", d.best >= 0 ? json(d.trials[std::size_t(d.best)].duration / per) : json(nullptr)},
          {"bracket", {d.lower / per, d.upper / per}},
          {"trials", trials}};
}

nlohmann::ordered_json final_run_summary(const DesignTaskOutcome& o) {
  using json = nlohmann::ordered_json;
  if (!o.after_run) return nullptr;
  json checks = json::array();
  for (const auto& c : work_checks(o.after_run->run()))
    checks.push_back({{"name", c.name},
                      {"value", std::isnan(c.value) ? json(nullptr) : json(c.value)},
                      {"tolerance", c.tolerance},
                      {"pass", std::isnan(c.value) ? json(nullptr) : json(c.pass())}});  // null: not computed
  const WorkRun before = o.before_run->run();
  return {{"objective_smooth", design_objective(before.result, o.settings.options.objective) / o.objective_per_unit},
          {"objective_designed", o.final_objective / o.objective_per_unit},
          {"summary", "designed_work_summary.json"},
          {"lines", "design_work_lines.csv"},
          {"checks", checks}};
}
}  // namespace

nlohmann::ordered_json task_summary(const DesignTaskOutcome& o) {
  using json = nlohmann::ordered_json;
  const auto& r = o.result;
  json parameters = json::array();
  for (std::size_t p = 0; p < r.parameters.size(); ++p) {
    json c = json::array();
    for (int k = 0; k < r.modes; ++k) c.push_back(r.amplitudes[p * r.modes + k]);
    const auto& t = o.tables[p];
    parameters.push_back({{"address", r.parameters[p].address},
                          {"from", conversion_rounded(r.parameters[p].from / t.value_per_unit)},
                          {"to", conversion_rounded(r.parameters[p].to / t.value_per_unit)},
                          {"unit", t.value_unit},
                          {"amplitudes", c},
                          {"table", t.file},
                          {"max_speed",
                           {{"unit", t.speed_unit()},
                            {"smooth_ramp", t.speed_before / t.speed_per_unit()},
                            {"designed", t.speed_after / t.speed_per_unit()},
                            {"limit", std::isfinite(t.speed_limit) ? json(t.speed_limit / t.speed_per_unit()) : json(nullptr)}}},
                          {"max_overshoot",
                           {{"unit", t.value_unit},
                            {"smooth_ramp", t.overshoot_before / t.value_per_unit},
                            {"designed", t.overshoot_after / t.value_per_unit},
                            {"limit", t.overshoot_limit / t.value_per_unit}}}});
  }
  int feasible = 0;
  for (const auto& e : r.history) feasible += e.feasible;
  return with_provenance(
      {{"command", "design"},
       {"scenario", o.scenario.file},
       {"family", o.family},
       {"objective", design_objective_name(o.settings.options.objective)},
       {"objective_unit", !o.objective_unit.empty()                                        ? o.objective_unit
                          : o.settings.options.objective == DesignObjective::quanta ? "quanta"
                                                                                    : "probability"},
       {"objective_before", r.objective_before / o.objective_per_unit},
       {"objective_after", r.objective_after / o.objective_per_unit},
       {"improvement_factor", r.objective_after > 0 ? json(r.objective_before / r.objective_after) : json(nullptr)},
       {"method", design_method_name(o.settings.options.method)},
       {"modes", r.modes},
       {"starts", o.settings.options.starts},
       {"evaluation_bound", o.settings.options.max_evaluations},
       {"evaluations", r.history.size()},
       {"runs_per_evaluation", o.settings.options.runs_per_evaluation},
       {"work_runs", r.work_runs},
       {"feasible_evaluations", feasible},
       {"bound_reached", r.bound_reached},
       {"start_results", r.start_results},
       {"amplitude_bound", o.settings.options.amplitude_bound},
       {"overshoot", o.settings.options.overshoot},
       {"parameters", parameters},
       {"designed_scenario", "designed.toml"},
       {"final_run", final_run_summary(o)},
       {"duration_search", duration_search_summary(o)},
       {"robust", robust_summary(o)},
       {"warnings", all_warnings(o)}},
      o.scenario);
}

std::vector<NamedText> task_texts(const DesignTaskOutcome& o) {
  std::vector<NamedText> texts;
  for (const auto& t : o.tables) {
    std::ostringstream out;
    out.precision(17);
    out << "t_" << column_unit(t.time_unit) << ",value" << (t.value_unit.empty() ? "" : "_" + column_unit(t.value_unit))
        << "\n";
    for (std::size_t i = 0; i < t.times.size(); ++i)
      out << t.times[i] / t.time_per_unit << ',' << t.after[i] / t.value_per_unit << '\n';
    texts.push_back({t.file, out.str()});
  }
  texts.push_back({"designed.toml", o.designed_text});
  if (o.after_run) texts.push_back({"designed_work_summary.json", task_summary(*o.after_run).dump(2) + "\n"});
  return texts;
}

std::vector<NamedFigure> task_figures(const DesignTaskOutcome& o) {
  StackedFigure schedule;
  schedule.title = "designed ramp against the smooth ramp";
  schedule.x_label = "time t (" + (o.tables.empty() ? std::string() : o.tables.front().time_unit) + ")";
  for (const auto& t : o.tables) {
    StackPanel panel;
    panel.y_label = t.address + (t.value_unit.empty() ? "" : " (" + t.value_unit + ")");
    SweepCurve before{"smooth ramp", {}, {}}, after{"designed", {}, {}};
    for (std::size_t i = 0; i < t.times.size(); ++i) {
      before.x.push_back(t.times[i] / t.time_per_unit);
      after.x.push_back(t.times[i] / t.time_per_unit);
      before.y.push_back(t.before[i] / t.value_per_unit);
      after.y.push_back(t.after[i] / t.value_per_unit);
    }
    panel.curves = {before, after};
    schedule.panels.push_back(std::move(panel));
  }
  SweepFigure convergence;
  convergence.title = "design search: objective of every evaluation";
  convergence.x_label = "evaluation";
  convergence.y_label = design_objective_name(o.settings.options.objective) +
                        (o.objective_unit.empty() ? "" : " (" + o.objective_unit + ")");
  convergence.log_y = true;
  SweepPoints points{"evaluations (feasible)", {}, {}, {}};
  SweepCurve best{"best so far", {}, {}};
  double lowest = std::numeric_limits<double>::infinity();
  for (const auto& e : o.result.history) {
    if (!e.feasible) continue;
    points.x.push_back(e.index);
    points.y.push_back(e.objective / o.objective_per_unit);
    lowest = std::min(lowest, e.objective / o.objective_per_unit);
    best.x.push_back(e.index);
    best.y.push_back(lowest);
  }
  convergence.points = {points};
  convergence.curves = {best};
  std::vector<NamedFigure> figures = {{"design_schedule", schedule}, {"design_convergence", convergence}};
  auto work_figure = [](const WorkOutcome& w, const std::string& stem, const std::string& title) {
    for (auto& f : work_figures(w.run()))
      if (f.stem == "work") {
        if (auto* wf = std::get_if<WorkFigure>(&f.figure)) wf->title = title;
        return NamedFigure{stem, std::move(f.figure)};
      }
    throw ContractViolation("design: the work run has no work figure");
  };
  if (o.before_run) figures.push_back(work_figure(*o.before_run, "design_work_before", "P(W) of the smooth ramp"));
  if (o.after_run) figures.push_back(work_figure(*o.after_run, "design_work_after", "P(W) of the designed ramp"));
  return figures;
}

std::vector<fs::path> write_task_outputs(const fs::path& folder, const DesignTaskOutcome& o) {
  return write_outputs(folder, task_tables(o), "design_summary.json", task_summary(o), task_texts(o), task_figures(o));
}

void print_task_report(std::ostream& out, const DesignTaskOutcome& o) {
  const auto& r = o.result;
  const std::string unit = o.objective_unit.empty() ? "" : " " + o.objective_unit;
  out << "design of " << o.scenario.file << ": " << o.family << "\n";
  if (o.duration_search) {
    const auto& d = *o.duration_search;
    const std::string unit = duration_unit(o.scenario);
    const double per = o.scenario.units.to_internal(parse_quantity("1 " + unit), Dimension::time());
    out << "shortest duration meeting " << design_objective_name(o.settings.options.objective) << " <= "
        << *o.settings.target << ":";
    for (const auto& t : d.trials)
      out << " " << short_number(t.duration / per, 10) << " " << unit << " "
          << (!t.ran ? "(too fast for the speed bound)" : !t.feasible ? "missed (no member within the bounds)" : t.met ? "met" : "missed") << ";";
    if (d.best >= 0)
      out << " shortest met " << short_number(d.trials[std::size_t(d.best)].duration / per, 10) << " " << unit
          << " (bracket " << short_number(d.lower / per, 10) << " to " << short_number(d.upper / per, 10) << " " << unit << ")";
    out << "\n";
  }
  out << "objective " << design_objective_name(o.settings.options.objective) << ": smooth ramp "
      << short_number(r.objective_before / o.objective_per_unit, 10) << unit << ", designed "
      << short_number(r.objective_after / o.objective_per_unit, 10) << unit;
  if (r.objective_after > 0) out << " (factor " << short_number(r.objective_before / r.objective_after, 10) << ")";
  const int members = o.settings.options.runs_per_evaluation;
  out << "\n" << r.history.size() << " evaluations";
  if (members > 1) out << " x " << members << " members = " << r.work_runs << " work runs";
  out << " (bound " << o.settings.options.max_evaluations << " work runs, every run counted";
  if (members > 1) out << "; after the search " << 2 * members << " member runs and 2 final runs";
  out << "), "
      << design_method_name(o.settings.options.method) << " from " << r.start_results.size() << " start(s):";
  for (std::size_t i = 0; i < r.start_results.size(); ++i) out << (i ? "; " : " ") << r.start_results[i];
  out << "\n";
  for (std::size_t p = 0; p < r.parameters.size(); ++p) {
    const auto& t = o.tables[p];
    out << "  " << r.parameters[p].address << " amplitudes:";
    for (int k = 0; k < r.modes; ++k) out << ' ' << short_number(r.amplitudes[p * r.modes + k], 10);
    out << "\n    largest speed " << short_number(t.speed_after / t.speed_per_unit(), 10) << " " << t.speed_unit()
        << " (smooth ramp " << short_number(t.speed_before / t.speed_per_unit(), 10) << ", limit "
        << (std::isfinite(t.speed_limit) ? short_number(t.speed_limit / t.speed_per_unit(), 10) : std::string("none"))
        << "); overshoot " << short_number(t.overshoot_after / t.value_per_unit, 10) << " " << t.value_unit << " (limit "
        << short_number(t.overshoot_limit / t.value_per_unit, 10) << ")\n";
  }
  if (!o.robust.empty()) {
    out << "robust: the objective averaged over " << o.robust.size() << " members (smooth ramp -> designed):\n";
    for (const auto& m : o.robust)
      out << "  " << m.label << ": " << short_number(m.objective_before / o.objective_per_unit, 10) << " -> "
          << short_number(m.objective_after / o.objective_per_unit, 10) << unit << "\n";
  }
  if (o.after_run) {
    const auto checks = work_checks(o.after_run->run());
    const auto failed = std::count_if(checks.begin(), checks.end(), [](const WorkCheck& c) { return !c.pass(); });
    const auto computed = std::count_if(checks.begin(), checks.end(), [](const WorkCheck& c) { return !std::isnan(c.value); });
    out << "final run of designed.toml (work pipeline, all checks): objective "
        << short_number(o.final_objective / o.objective_per_unit, 10) << unit << "; " << computed - failed << " of "
        << computed << " computed checks pass (designed_work_summary.json); P(W) before and after beside the harmonic "
        << "prediction: design_work_lines.csv, design_work_before/after.png\n";
  }
  for (const auto& w : all_warnings(o)) out << "warning: " << w << "\n";
  out << "run `trapwork work designed.toml` in the output folder for the designed ramp's full outputs\n";
}

}  // namespace trapwork
