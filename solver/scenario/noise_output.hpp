#pragma once
// The outputs of a noisy work run ([noise], solver/noise.hpp) beside the noiseless ones:
// noise_lines.csv (each work line with and without noise, the noisy probability's standard
// error), the "noise" object of summary.json and the report's noise section.
#include <nlohmann/json.hpp>
#include <ostream>

#include "solver/noise.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/work_output.hpp"
#include "solver/scenario/scenario.hpp"

namespace trapwork {

CsvTable noise_lines_table(const Scenario& s, const NoisyWorkResult& r);
nlohmann::ordered_json noise_summary(const Scenario& s, const NoisyWorkResult& r);
void print_noise_report(std::ostream& out, const Scenario& s, const NoisyWorkResult& r);
// work.png with noise: the run's figure (its P(W), the harmonic prediction) with the noisy P(W)
// and its standard errors beside them.
WorkFigure noisy_work_figure(const WorkRun& run, const NoisyWorkResult& r);

}  // namespace trapwork
