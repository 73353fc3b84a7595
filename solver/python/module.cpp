// _trapwork: the compiled part of the Python module `trapwork` (solver/python/trapwork/ holds
// the Python part, which users import). A thin layer over the scenario layer: scenarios are
// passed as TOML text and a file name and read by read_scenario_text, the computations are the
// scenario layer's, and every result comes back as a NativeResult: its tables (the CSV files'
// columns), its summary (the JSON file's text), figure data, the CLI's report, and a writer
// that renders the files the CLI writes.
#include <pybind11/functional.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <memory>
#include <sstream>
#include <string>
#include <vector>

#include "solver/errors.hpp"
#include "solver/propagator.hpp"
#include "solver/python/native_result.hpp"
#include "solver/python/run.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/scenario_edit.hpp"
#include "solver/scenario/work_output.hpp"

namespace py = pybind11;
namespace fs = std::filesystem;
using namespace trapwork;

namespace trapwork_python {

namespace {

std::string read_text_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>());
}

// Says which scenario the physics could not handle, in its lab units (as the CLI does).
template <class F>
auto naming_scenario(const Scenario& scenario, F&& f) {
  try {
    return f();
  } catch (const NonFinitePotentialError& e) {
    throw PhysicsError(scenario.file + ": " + e.describe(scenario.spectrum.message_units));
  } catch (const PhysicsError& e) {
    throw PhysicsError(scenario.file + ": " + e.what());
  }
}

// ---- spectrum ---------------------------------------------------------------------------------
struct SpectrumRun {
  Scenario scenario;
  SpectrumResult result;
};

std::shared_ptr<NativeResult> spectrum_result(std::shared_ptr<SpectrumRun> run) {
  auto r = std::make_shared<NativeResult>();
  r->kind = "spectrum";
  r->tables = {{"spectrum.csv", spectrum_table(run->scenario, run->result)},
               {"states.csv", states_table(run->scenario, run->result)}};
  r->summary = spectrum_summary(run->scenario, run->result);
  std::ostringstream report;
  print_spectrum_report(report, run->scenario, run->result);
  r->report = report.str();
  r->inputs = scenario_inputs(run->scenario);
  r->writer = [run](const fs::path& folder) { return write_spectrum_outputs(folder, run->scenario, run->result); };
  return r;
}

std::shared_ptr<NativeResult> module_spectrum(const std::string& text, const std::string& name,
                                           std::optional<int> levels, py::object progress, py::object notice) {
  std::function<std::shared_ptr<SpectrumRun>(const TaskHooks&)> compute = [&](const TaskHooks&) {
    auto run = std::make_shared<SpectrumRun>();
    run->scenario = read_scenario_text(text, name);
    if (levels) {
      if (*levels < 1 || *levels > 100000)
        throw InputError("levels", std::to_string(*levels), "a number of levels from 1 to 100000");
      run->scenario.spectrum.options.levels = *levels;
    }
    run->scenario.spectrum.options.memory_limit = available_memory_bytes();  // refused before it allocates
    run->result = naming_scenario(run->scenario, [&] { return compute_spectrum(run->scenario.potential,
                                                                               run->scenario.spectrum); });
    return run;
  };
  auto run = run_interruptible(compute, progress, notice, "spectrum");
  return spectrum_result(run);
}

// ---- work -------------------------------------------------------------------------------------
struct WorkOutcomeHere {
  Scenario scenario;
  std::optional<ToleranceChoice> choice;
  std::optional<ScenarioWork> direct;
  WorkRun run() const {
    const Scenario& used = choice ? choice->scenario : scenario;
    WorkRun r = choice ? choice->work->run(used) : direct->run(used);
    r.tolerance = choice ? &*choice : nullptr;
    return r;
  }
};

std::shared_ptr<NativeResult> work_result(std::shared_ptr<WorkOutcomeHere> outcome) {
  auto r = std::make_shared<NativeResult>();
  r->kind = "work";
  const WorkRun run = outcome->run();
  r->tables = {{"lines.csv", lines_table(run, run.result.distribution, "work lines")},
               {"histogram.csv", histogram_table(run)},
               {"density.csv", density_table(run)},
               {"transition.csv", transition_table(run)}};
  if (run.result.reverse_distribution)
    r->tables.push_back({"reverse_lines.csv", lines_table(run, *run.result.reverse_distribution, "reverse-run work lines")});
  r->tables.push_back({"characteristic.csv", characteristic_table(run)});
  r->summary = work_summary(run);
  std::ostringstream report;
  print_work_report(report, run);
  r->report = report.str();
  r->inputs = scenario_inputs(outcome->scenario);
  r->writer = [outcome](const fs::path& folder) { return write_work_outputs(folder, outcome->run()); };
  return r;
}

std::shared_ptr<NativeResult> module_work(const std::string& text, const std::string& name, std::optional<double> tolerance,
                                       double search_budget, py::object progress, py::object notice) {
  std::function<std::shared_ptr<WorkOutcomeHere>(const TaskHooks&)> compute = [&](const TaskHooks& hooks) {
    auto outcome = std::make_shared<WorkOutcomeHere>();
    outcome->scenario = read_scenario_text(text, name);
    const Scenario& scenario = outcome->scenario;
    (void)build_protocol(scenario);  // a missing [protocol] is reported before a missing [initial]
    WorkRequest request = work_request(scenario);
    request.spectrum.options.memory_limit = available_memory_bytes();
    request.progress = hooks.progress;
    request.stage = hooks.stage;
    const int threads = request.threads;
    request.on_estimate = [notice = hooks.notice, threads](const CostEstimate& e) {
      if (estimated_seconds(e.operations, threads) > long_run_seconds)
        notice("trapwork: " + cost_text(e, threads) + " (" + e.what + ")");
    };
    if (tolerance) {
      if (!(*tolerance > 0 && *tolerance < 1))
        throw InputError("tolerance", short_number(*tolerance), "a bound between 0 and 1 (e.g. 1e-4)");
      if (!(search_budget >= 1))
        throw InputError("search_budget", short_number(search_budget),
                         "a cost bound >= 1 (in units of the search's first run)");
      request.stage = nullptr;
      request.on_estimate = nullptr;
      outcome->choice = naming_scenario(scenario, [&] {
        return compute_work_to_tolerance(scenario, request, *tolerance, search_budget);
      });
      outcome->choice->work->request.progress = nullptr;
    } else {
      outcome->direct = naming_scenario(scenario, [&] { return compute_work(scenario, request); });
      outcome->direct->request.progress = nullptr;  // the hooks end with this call
      outcome->direct->request.stage = nullptr;
      outcome->direct->request.on_estimate = nullptr;
    }
    return outcome;
  };
  auto outcome = run_interruptible(compute, progress, notice,
                                   tolerance ? "tolerance search (share of its cost bound)" : "propagating");
  return work_result(outcome);
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

  m.def("default_scenario_text", [] { return std::string(default_scenario_text()); });
  m.def("scenario_file_text", &scenario_file_text, py::arg("path"));
  m.def("scenario_info", &scenario_info, py::arg("text"), py::arg("name"));
  m.def("scenario_text_with_values", &text_with_values, py::arg("text"), py::arg("name"), py::arg("values"));
  m.def("scenario_text_from_json", &text_from_json, py::arg("scenario"), py::arg("name"));
  m.def("spectrum", &module_spectrum, py::arg("text"), py::arg("name"), py::arg("levels"), py::arg("progress"),
        py::arg("notice"));
  m.def("work", &module_work, py::arg("text"), py::arg("name"), py::arg("tolerance"), py::arg("search_budget"),
        py::arg("progress"), py::arg("notice"));
}
