// Benchmark (not a test): the cost of the forward run's time traces (WorkTraces, solver/work.hpp)
// on scenario files: the whole work calculation (compute_work: spectra, forward, half-step and
// reverse runs) with WorkRequest::trace_points = 0 (no traces) and with the default, each case
// `repeats` times in its own child process (harness.hpp), alternating; prints the median wall
// and CPU times and their ratio.
//
//   build/validation/bench_traces [repeats=3] scenario.toml ...   (no file: the built-in scenario)
#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "harness.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/work_output.hpp"

using namespace trapwork;
using namespace trapwork_bench;

namespace {
double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v.empty() ? NAN : v[v.size() / 2];
}
}  // namespace

int main(int argc, char** argv) {
  const int repeats = argc > 1 ? std::max(1, std::atoi(argv[1])) : 3;
  std::vector<std::string> files;
  for (int i = 2; i < argc; ++i) files.push_back(argv[i]);
  if (files.empty()) files.push_back("default");
  std::printf("%-40s %8s %12s %12s %12s %12s %8s %8s\n", "scenario", "points", "wall_off_s", "wall_on_s", "cpu_off_s",
              "cpu_on_s", "wall_x", "cpu_x");
  for (const auto& file : files) {
    std::vector<double> wall[2], cpu[2];
    double points = 0;
    for (int r = 0; r < repeats; ++r)
      for (int traced = 0; traced < 2; ++traced) {
        const Measurement m = in_child([&] {
          const Scenario s = file == "default" ? read_scenario_text(default_scenario_text(), "default") : read_scenario(file);
          WorkRequest request = work_request(s);
          if (!traced) request.trace_points = 0;
          Stopwatch clock;
          const ScenarioWork w = compute_work(s, request);
          return clock.result({double(w.result().traces.time.size())});
        });
        if (!m.ok) continue;
        wall[traced].push_back(m.wall_s);
        cpu[traced].push_back(m.cpu_s);
        if (traced && !m.values.empty()) points = m.values[0];
      }
    const double w0 = median(wall[0]), w1 = median(wall[1]), c0 = median(cpu[0]), c1 = median(cpu[1]);
    std::printf("%-40s %8.0f %12.3f %12.3f %12.3f %12.3f %8.3f %8.3f\n", file.c_str(), points, w0, w1, c0, c1, w1 / w0,
                c1 / c0);
  }
  return 0;
}
