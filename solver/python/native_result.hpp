#pragma once
// One finished computation as the Python module sees it (see module.cpp).
#include <pybind11/pybind11.h>

#include <filesystem>
#include <functional>
#include <nlohmann/json.hpp>
#include <string>
#include <utility>
#include <vector>

#include "solver/scenario/output.hpp"

namespace trapwork_python {

struct NativeResult {
  std::string kind;                                          // "spectrum", "work", ...
  std::vector<std::pair<std::string, trapwork::CsvTable>> tables;  // file name -> table, in file order
  nlohmann::ordered_json summary;                            // the summary file's content
  std::vector<std::pair<std::string, std::string>> texts;    // other files: name -> text (fitted.toml)
  pybind11::list figures;                                    // (stem, dict of figure data)
  std::string report;                                        // the CLI's report
  std::vector<trapwork::OutputRun::Input> inputs;            // files an output must not replace
  // Writes the files the CLI writes into a folder (created if missing); returns their paths.
  std::function<std::vector<std::filesystem::path>(const std::filesystem::path&)> writer;
};

// The Python class NativeResult and the function write_files (output through OutputRun).
void bind_native_result(pybind11::module_& m);

}  // namespace trapwork_python
