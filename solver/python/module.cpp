// _trapwork: the compiled part of the Python module `trapwork` (solver/python/trapwork/ holds
// the Python part, which users import). A thin layer over the scenario layer's task layer
// (solver/scenario/tasks.hpp): scenarios are passed as TOML text and a file name and read by
// read_scenario_text, each function calls its task on a worker thread (run.hpp), and every
// outcome comes back as a NativeResult: its tables (the CSV files' columns), its summary (the
// JSON file's content), other files' text, figure data, the CLI's report, and a writer that
// renders the files the CLI writes (write_task_outputs).
#include <pybind11/functional.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <filesystem>
#include <fstream>
#include <iterator>
#include <memory>
#include <sstream>
#include <string>
#include <variant>
#include <vector>

#include "solver/errors.hpp"
#include "solver/python/figures.hpp"
#include "solver/python/native_result.hpp"
#include "solver/python/run.hpp"
#include "solver/scenario/design_task.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/scenario_edit.hpp"
#include "solver/scenario/tasks.hpp"

namespace py = pybind11;
namespace fs = std::filesystem;
using namespace trapwork;

namespace trapwork_python {

namespace {

std::string read_text_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>());
}

// The NativeResult of a task's outcome: everything taken from the task layer's accessors, so
// that the module shows what the command line writes.
template <class X>
std::shared_ptr<NativeResult> native_of(std::shared_ptr<X> outcome, std::string kind,
                                        std::vector<OutputRun::Input> inputs) {
  auto r = std::make_shared<NativeResult>();
  r->kind = std::move(kind);
  for (auto& t : task_tables(*outcome)) r->tables.emplace_back(t.file, std::move(t.table));
  r->summary = task_summary(*outcome);
  for (auto& t : task_texts(*outcome)) r->texts.emplace_back(t.file, std::move(t.text));
  for (const auto& f : task_figures(*outcome))
    r->figures.append(py::make_tuple(f.stem, std::visit([](const auto& d) { return figure_dict(d); }, f.figure)));
  std::ostringstream report;
  print_task_report(report, *outcome);
  r->report = report.str();
  r->inputs = std::move(inputs);
  r->writer = [outcome](const fs::path& folder) { return write_task_outputs(folder, *outcome); };
  return r;
}

// How a run was asked for (Scenario::invocation, changed_values): the Python call and the
// values Scenario.with_values changed, recorded in every summary as the command line records its own.
using Provenance = std::pair<std::string, std::vector<std::string>>;

Scenario read_for(const std::string& text, const std::string& name, const Provenance& provenance) {
  Scenario s = read_scenario_text(text, name);
  s.invocation = provenance.first;
  s.changed_values = provenance.second;
  return s;
}

template <class X>
std::shared_ptr<X> compute(const std::function<X(const TaskHooks&)>& task, py::object progress, py::object notice,
                           const std::string& first_stage) {
  std::function<std::shared_ptr<X>(const TaskHooks&)> f = [&](const TaskHooks& hooks) {
    return std::make_shared<X>(task(hooks));
  };
  return run_interruptible(f, std::move(progress), std::move(notice), first_stage);
}

std::shared_ptr<NativeResult> module_spectrum(const std::string& text, const std::string& name,
                                              std::optional<int> levels, py::object progress, py::object notice, const Provenance& provenance) {
  std::function<SpectrumOutcome(const TaskHooks&)> task = [&](const TaskHooks& hooks) {
    if (levels && (*levels < 1 || *levels > 100000))
      throw InputError("levels", std::to_string(*levels), "a number of levels from 1 to 100000");
    return spectrum_task(read_for(text, name, provenance), levels, hooks);
  };
  auto outcome = compute(task, progress, notice, "spectrum");
  return native_of(outcome, "spectrum", scenario_inputs(outcome->scenario));
}

std::shared_ptr<NativeResult> module_work(const std::string& text, const std::string& name,
                                          std::optional<double> tolerance, double search_budget, py::object progress,
                                          py::object notice, const Provenance& provenance,
                                          const UncertaintySettings& uncertainty) {
  std::function<WorkOutcome(const TaskHooks&)> task = [&](const TaskHooks& hooks) {
    const Scenario scenario = read_for(text, name, provenance);
    (void)build_protocol(scenario);  // as the command line: a missing [protocol] before a missing [initial]
    if (has_calibration(scenario, uncertainty)) (void)calibration_of(scenario, uncertainty);
    WorkOutcome o = work_task(scenario, tolerance, search_budget, hooks);
    add_work_uncertainty(o, uncertainty, hooks);
    return o;
  };
  auto outcome = compute(task, progress, notice, tolerance ? "--tolerance search (share of its cost bound)" : "propagating");
  return native_of(outcome, "work", scenario_inputs(outcome->scenario));
}

std::shared_ptr<NativeResult> module_sweep(const std::string& text, const std::string& name, int jobs,
                                           py::object progress, py::object notice, const Provenance& provenance,
                                           const UncertaintySettings& uncertainty) {
  std::function<SweepOutcome(const TaskHooks&)> task = [&](const TaskHooks& hooks) {
    const Scenario scenario = read_for(text, name, provenance);
    if (!scenario.sweep)
      throw InputError("sweep", "", "a [sweep] table: parameter, and values = [...] or from, to, points", "",
                       scenario.file);
    if (jobs < 0 || jobs > 4096)
      throw InputError("jobs", std::to_string(jobs), "points at a time, 1 to 4096 (None: the number of cores)");
    (void)build_protocol(scenario);  // as the command line: the errors of a missing [protocol] or [initial] first
    (void)work_request(scenario);
    SweepOptions options;
    options.jobs = jobs;
    options.uncertainty = uncertainty;
    return sweep_task(scenario, options, hooks);
  };
  auto outcome = compute(task, progress, notice, "sweep points");
  return native_of(outcome, "sweep", scenario_inputs(outcome->scenario));
}

// The start scenario is `start_text` named `start_name`, or when that is empty the one made from
// mass and frequency (named as the command line names it).
std::shared_ptr<NativeResult> module_fit(const std::string& data, const std::string& start_text,
                                         const std::string& start_name, const std::string& mass,
                                         const std::string& frequency, const std::string& terms, py::object progress,
                                         py::object notice, const Provenance& provenance) {
  std::function<FitOutcome(const TaskHooks&)> task = [&](const TaskHooks&) {
    (void)read_transition_lines(data);  // as the command line: its errors before the start scenario's
    FitSettings settings;
    settings.data = data;
    settings.start_text = start_text.empty() ? fit_start_text(mass, frequency) : start_text;
    settings.start_name = start_text.empty() ? "--mass " + mass + " --frequency " + frequency : start_name;
    settings.terms = terms;
    settings.fitted_name = "fitted.toml";
    settings.invocation = provenance.first;
    settings.changed_values = provenance.second;
    return fit_task(settings);
  };
  auto outcome = compute(task, progress, notice, "fit");
  std::vector<OutputRun::Input> inputs;
  if (!start_text.empty()) inputs = scenario_inputs(outcome->start);
  inputs.push_back({data, "the data file"});
  return native_of(outcome, "fit", inputs);
}

// Other models (--against) as (text, name) pairs of their scenarios.
using ScenarioTexts = std::vector<std::pair<std::string, std::string>>;

std::shared_ptr<NativeResult> module_compare(const std::string& text, const std::string& name, const std::string& data,
                                             const std::string& resolution, int resamples, std::uint64_t seed,
                                             double confidence, py::object progress, py::object notice,
                                             const Provenance& provenance, const ScenarioTexts& against,
                                             const ModelChoiceSettings& models, const UncertaintySettings& uncertainty) {
  std::function<CompareTaskOutcome(const TaskHooks&)> task = [&](const TaskHooks& hooks) {
    CompareSettings settings;
    settings.data = data;
    settings.resolution = resolution;
    settings.resamples = resamples;
    settings.seed = seed;
    settings.confidence = confidence;
    // as compare_command.cpp: --against, --calibration, --decision-confidence, --fitted-parameters, --prior
    settings.models = models;
    for (const auto& other : against) settings.models.against.push_back(read_scenario_text(other.first, other.second));
    settings.models.seed = seed;
    settings.uncertainty = uncertainty;
    const Scenario scenario = read_for(text, name, provenance);
    if (has_calibration(scenario, settings.uncertainty)) (void)calibration_of(scenario, settings.uncertainty);
    return compare_task(scenario, settings, hooks);
  };
  auto outcome = compute(task, progress, notice, "propagating");
  auto inputs = scenario_inputs(outcome->scenario);
  inputs.push_back({data, "the data file"});
  if (outcome->choice)
    for (std::size_t j = 1; j < outcome->choice->files.size(); ++j)
      inputs.push_back({outcome->choice->files[j], "a model compared against"});
  return native_of(outcome, "compare", inputs);
}

std::shared_ptr<NativeResult> module_plan(const std::string& text, const std::string& name, const std::vector<int>& runs,
                                          const std::vector<std::string>& resolutions, std::optional<double> target,
                                          int experiments, std::uint64_t seed, bool correct_resolution,
                                          int synthetic_runs, py::object progress, py::object notice, const Provenance& provenance,
                                          const ScenarioTexts& against, double power, double decision_confidence) {
  std::function<PlanTaskOutcome(const TaskHooks&)> task = [&](const TaskHooks& hooks) {
    PlanSettings settings;
    // as plan_command.cpp: --against (one model), --power, --decision-confidence
    if (!against.empty()) settings.against = read_scenario_text(against.front().first, against.front().second);
    settings.power = power;
    settings.decision_confidence = decision_confidence;
    settings.runs = runs;
    settings.resolutions = resolutions;
    settings.target_kT = target;
    settings.experiments = experiments;
    settings.seed = seed;
    settings.correct_resolution = correct_resolution;
    settings.synthetic_runs = synthetic_runs;
    return plan_task(read_for(text, name, provenance), settings, hooks);
  };
  auto outcome = compute(task, progress, notice, "plan");
  return native_of(outcome, "plan", scenario_inputs(outcome->scenario));
}

// `trapwork design`: the options of the command line, by name (design_task.hpp).
std::shared_ptr<NativeResult> module_design(const std::string& text, const std::string& name, const py::dict& o,
                                            py::object progress, py::object notice, const Provenance& provenance) {
  DesignSettings settings;
  settings.scenario_text = text;
  DesignOptions& d = settings.options;
  d.modes = o["modes"].cast<int>();
  d.starts = o["starts"].cast<int>();
  d.max_evaluations = o["evaluations"].cast<int>();
  d.objective = design_objective_from_name(o["objective"].cast<std::string>());
  d.method = design_method_from_name(o["method"].cast<std::string>());
  d.amplitude_bound = o["amplitude_bound"].cast<double>();
  d.overshoot = o["overshoot"].cast<double>();
  d.stop_below = o["stop_below"].cast<double>();
  d.zero_end_acceleration = o["smoother"].cast<bool>();
  d.seed = o["seed"].cast<std::uint64_t>();
  settings.max_speed = o["max_speed"].cast<std::vector<std::string>>();
  settings.max_overshoot = o["max_overshoot"].cast<std::vector<std::string>>();
  settings.target = o["target"].cast<std::optional<std::string>>();
  settings.shortest = o["shortest"].cast<std::string>();
  settings.bisections = o["bisections"].cast<int>();
  settings.robust_variants = o["robust"].cast<std::vector<std::string>>();
  settings.robust_fit = o["robust_fit"].cast<std::string>();
  settings.robust_term = o["robust_term"].cast<std::string>();
  settings.robust_samples = o["robust_samples"].cast<int>();
  std::function<DesignTaskOutcome(const TaskHooks&)> task = [&, settings](const TaskHooks& hooks) {
    return design_task(read_for(text, name, provenance), settings, hooks);
  };
  auto outcome = compute(task, progress, notice, "design");
  return native_of(outcome, "design", scenario_inputs(outcome->scenario));
}

// ---- scenarios --------------------------------------------------------------------------------

// Reads a scenario file as the CLI does (same errors) and returns its text.
std::string scenario_file_text(const std::string& path) {
  (void)read_scenario(path);
  return read_text_file(path);
}

// Checks scenario text (InputError with file, line and column) and returns what Python shows.
py::dict scenario_info(const std::string& text, const std::string& name) {
  const Scenario s = read_scenario_text(text, name);
  py::dict info;
  info["title"] = s.title;
  info["description"] = s.description;
  info["has_protocol"] = bool(s.protocol);
  info["has_initial"] = bool(s.work);
  info["has_sweep"] = bool(s.sweep);
  return info;
}

// The scenario text with values changed (scenario_edit.hpp), checked by the reader. `values`:
// a JSON object as text (Python's json.dumps).
std::string text_with_values(const std::string& text, const std::string& name, const std::string& values) {
  const std::string edited = scenario_text_with_values(text, name, nlohmann::json::parse(values));
  (void)read_scenario_text(edited, name);
  return edited;
}

std::string text_from_json(const std::string& scenario, const std::string& name) {
  const std::string text = scenario_text_from_json(nlohmann::json::parse(scenario));
  (void)read_scenario_text(text, name);
  return text;
}

}  // namespace

}  // namespace trapwork_python

PYBIND11_MODULE(_trapwork, m) {
  using namespace trapwork_python;
  m.doc() = "Compiled part of the trapwork module (import trapwork instead).";
  // Library errors: InputError is bad input (a ValueError), PhysicsError valid input that cannot
  // be computed (a RuntimeError); both keep the library's located message. std::bad_alloc
  // becomes MemoryError (pybind11's own translation).
  static py::exception<InputError> input_error(m, "InputError", PyExc_ValueError);
  static py::exception<PhysicsError> physics_error(m, "PhysicsError", PyExc_RuntimeError);
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const InputError& e) {
      PyErr_SetString(input_error.ptr(), e.what());
    } catch (const PhysicsError& e) {
      PyErr_SetString(physics_error.ptr(), e.what());
    }
  });

  bind_native_result(m);

  m.def("version", [] { return std::string(trapwork_version()); });
  m.def("default_scenario_text", [] { return std::string(default_scenario_text()); });
  m.def("scenario_file_text", &scenario_file_text, py::arg("path"));
  m.def("scenario_info", &scenario_info, py::arg("text"), py::arg("name"));
  m.def("scenario_text_with_values", &text_with_values, py::arg("text"), py::arg("name"), py::arg("values"));
  m.def("scenario_text_from_json", &text_from_json, py::arg("scenario"), py::arg("name"));
  m.def("spectrum", &module_spectrum, py::arg("text"), py::arg("name"), py::arg("levels"), py::arg("progress"),
        py::arg("notice"), py::arg("provenance"));
  // the calibration's settings as for work (below): a fit's file, or "" for the scenario's table
  const auto uncertainty_of = [](const std::string& calibration, const std::string& method, int samples,
                                 std::uint64_t seed) {
    UncertaintySettings u;
    u.calibration = calibration;
    u.method = method;
    u.samples = samples;
    u.seed = seed;
    return u;
  };
  m.def(
      "sweep",
      [uncertainty_of](const std::string& text, const std::string& name, int jobs, py::object progress,
                       py::object notice, const Provenance& provenance, const std::string& calibration,
                       const std::string& method, int samples, std::uint64_t seed) {
        return module_sweep(text, name, jobs, progress, notice, provenance,
                            uncertainty_of(calibration, method, samples, seed));
      },
      py::arg("text"), py::arg("name"), py::arg("jobs"), py::arg("progress"), py::arg("notice"),
      py::arg("provenance"), py::arg("uncertainty") = std::string(), py::arg("uncertainty_method") = std::string("auto"),
      py::arg("uncertainty_samples") = 100, py::arg("uncertainty_seed") = 1);
  m.def("fit", &module_fit, py::arg("data"), py::arg("start_text"), py::arg("start_name"), py::arg("mass"),
        py::arg("frequency"), py::arg("terms"), py::arg("progress"), py::arg("notice"), py::arg("provenance"));
  m.def(
      "compare",
      [](const std::string& text, const std::string& name, const std::string& data, const std::string& resolution,
         int resamples, std::uint64_t seed, double confidence, py::object progress, py::object notice,
         const Provenance& provenance, const ScenarioTexts& against, int calibration_sets,
         double decision_confidence, const std::vector<int>& fitted_parameters, const std::vector<double>& prior,
         const std::string& calibration, int samples, std::uint64_t uncertainty_seed) {
        ModelChoiceSettings models;  // read here, with the GIL held
        models.calibration = calibration_sets;
        models.confidence = decision_confidence;
        models.fitted_parameters = fitted_parameters;
        models.prior = prior;
        UncertaintySettings u;
        u.calibration = calibration;
        u.samples = samples;
        u.seed = uncertainty_seed;
        return module_compare(text, name, data, resolution, resamples, seed, confidence, progress, notice, provenance,
                              against, models, u);
      },
      py::arg("text"), py::arg("name"), py::arg("data"), py::arg("resolution"), py::arg("resamples"), py::arg("seed"),
      py::arg("confidence"), py::arg("progress"), py::arg("notice"), py::arg("provenance"),
      py::arg("against") = ScenarioTexts(), py::arg("calibration") = 1000, py::arg("decision_confidence") = 0.95,
      py::arg("fitted_parameters") = std::vector<int>(), py::arg("prior") = std::vector<double>(),
      py::arg("uncertainty") = std::string(),
      py::arg("uncertainty_samples") = 20, py::arg("uncertainty_seed") = 1);
  m.def("plan", &module_plan, py::arg("text"), py::arg("name"), py::arg("runs"), py::arg("resolutions"),
        py::arg("target"), py::arg("experiments"), py::arg("seed"), py::arg("correct_resolution"),
        py::arg("synthetic_runs"), py::arg("progress"), py::arg("notice"), py::arg("provenance"),
        py::arg("against") = ScenarioTexts(), py::arg("power") = 0.9, py::arg("decision_confidence") = 0.95);
  m.def("design", &module_design, py::arg("text"), py::arg("name"), py::arg("options"), py::arg("progress"),
        py::arg("notice"), py::arg("provenance"));
  m.def(
      "work",
      [uncertainty_of](const std::string& text, const std::string& name, std::optional<double> tolerance,
                       double search_budget, py::object progress, py::object notice, const Provenance& provenance,
                       const std::string& calibration, const std::string& method, int samples, std::uint64_t seed) {
        return module_work(text, name, tolerance, search_budget, progress, notice, provenance,
                           uncertainty_of(calibration, method, samples, seed));
      },
      py::arg("text"), py::arg("name"), py::arg("tolerance"), py::arg("search_budget"), py::arg("progress"),
      py::arg("notice"), py::arg("provenance"), py::arg("uncertainty") = std::string(),
      py::arg("uncertainty_method") = std::string("auto"), py::arg("uncertainty_samples") = 100,
      py::arg("uncertainty_seed") = 1);
}
