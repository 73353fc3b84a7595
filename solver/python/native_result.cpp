// NativeResult for Python: numpy columns, the summary as JSON text, the files as bytes, and
// writing files through OutputRun (see native_result.hpp).
#include "solver/python/native_result.hpp"

#include <pybind11/numpy.h>
#include <pybind11/stl.h>

#include <csignal>
#include <cstdlib>
#include <fstream>
#include <iterator>
#include <stdexcept>
#include <unistd.h>

#include "solver/errors.hpp"

namespace py = pybind11;
namespace fs = std::filesystem;

namespace trapwork_python {

namespace {

py::array_t<double> numpy_of(const std::vector<double>& values) {
  py::array_t<double> a(values.size());
  std::copy(values.begin(), values.end(), a.mutable_data());
  return a;
}

// A fresh private folder under the system's temporary folder (mkdtemp), removed by the destructor.
struct ScratchFolder {
  fs::path path;
  ScratchFolder() {
    std::string pattern = (fs::temp_directory_path() / "trapwork-python-XXXXXX").string();
    if (!::mkdtemp(pattern.data())) throw std::runtime_error("cannot create a temporary folder in " +
                                                             fs::temp_directory_path().string());
    path = pattern;
  }
  ~ScratchFolder() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
};

// The files of a result as {name: bytes}, rendered by its writer into a scratch folder. The GIL
// stays held: PLplot, which draws the figures, is not thread-safe.
py::dict render_files(const NativeResult& r) {
  if (!r.writer) throw std::logic_error("this result has no writer");
  ScratchFolder scratch;
  py::dict files;
  for (const auto& path : r.writer(scratch.path)) {
    std::ifstream in(path, std::ios::binary);
    const std::string bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    if (!in.good() && !in.eof()) throw std::runtime_error("cannot read back " + path.string());
    files[py::str(path.filename().string())] = py::bytes(bytes);
  }
  return files;
}

// Writes {name: bytes} into `folder` as one run of the CLI does (trapwork/output.hpp's
// OutputRun: folder lock, staged files, commit). `inputs`: (path, what) of the run's inputs,
// which no output may replace. A SIGINT during the write phase makes commit() discard the staged
// files and raise the signal with the previous disposition: in Python, its handler, which marks
// a KeyboardInterrupt pending; commit() then throws, and that KeyboardInterrupt is raised here.
std::vector<std::string> write_files(const std::string& folder, const std::vector<std::pair<std::string, py::bytes>>& files,
                                     const std::vector<std::pair<std::string, std::string>>& inputs,
                                     const std::string& command) {
  std::vector<std::string> names;
  std::vector<std::pair<std::string, std::string>> contents;
  for (const auto& [name, bytes] : files) {
    if (name.empty() || name.find('/') != std::string::npos || name[0] == '.')
      throw trapwork::InputError("files", name, "a plain file name");
    names.push_back(name);
    contents.emplace_back(name, std::string(bytes));
  }
  std::vector<trapwork::OutputRun::Input> ins;
  for (const auto& [path, what] : inputs) ins.push_back({path, what});
  std::vector<fs::path> written;
  try {
    trapwork::OutputRun run(folder, names, ins, command);
    std::vector<fs::path> staged;
    for (const auto& [name, bytes] : contents) {
      const fs::path path = run.staging() / name;
      trapwork::write_file_atomically(path, [&bytes = bytes](std::ostream& out) { out.write(bytes.data(), std::streamsize(bytes.size())); });
      staged.push_back(path);
    }
    written = run.commit(staged);
  } catch (const trapwork::InputError&) {
    throw;
  } catch (const std::runtime_error&) {
    if (PyErr_CheckSignals() != 0) throw py::error_already_set();  // commit's re-raised SIGINT
    throw;
  }
  if (PyErr_CheckSignals() != 0) throw py::error_already_set();  // a SIGINT held back during the renames
  std::vector<std::string> out;
  for (const auto& p : written) out.push_back(p.string());
  return out;
}

}  // namespace

void bind_native_result(py::module_& m) {
  py::class_<NativeResult, std::shared_ptr<NativeResult>>(m, "NativeResult",
                                                          "A computation's result held in C++ (see trapwork.Result).")
      .def_readonly("kind", &NativeResult::kind)
      .def_readonly("report", &NativeResult::report)
      .def("tables", [](const NativeResult& r) {
        py::list out;
        for (const auto& [file, table] : r.tables) {
          py::list columns;
          for (const auto& c : table.columns) columns.append(py::make_tuple(c.name, numpy_of(c.values)));
          out.append(py::make_tuple(file, columns, table.comments));
        }
        return out;
      }, "[(file name, [(column name, numpy array)], [comment lines])] in file order")
      .def("summary_json", [](const NativeResult& r) { return r.summary.dump(2) + "\n"; },
           "the summary file's text")
      .def_readonly("figures", &NativeResult::figures)
      .def("texts", [](const NativeResult& r) { return r.texts; }, "[(file name, text)] of the other files")
      .def("inputs", [](const NativeResult& r) {
        std::vector<std::pair<std::string, std::string>> out;
        for (const auto& i : r.inputs) out.emplace_back(i.path.string(), i.what);
        return out;
      }, "[(path, what)] of the run's input files")
      .def("render_files", &render_files, "{file name: bytes} of the files the command line writes");
  m.def("write_files", &write_files, py::arg("folder"), py::arg("files"), py::arg("inputs"), py::arg("command"));
}

}  // namespace trapwork_python
