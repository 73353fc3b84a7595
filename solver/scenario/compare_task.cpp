// `trapwork compare` as a task (see tasks.hpp): measured work data against the scenario's work
// model (solver/compare.hpp).
#include <algorithm>
#include <cmath>
#include <cstdio>

#include "solver/errors.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/work_output.hpp"

namespace trapwork {

namespace fs = std::filesystem;

namespace {

// The resolution sigma used: the option, the data file's "# resolution:", the scenario's [work]
// resolution, in that order. Level pairs need none; other data refuse to guess.
double resolution_for(const CompareSettings& c, const Scenario& s, const WorkData& data, std::string& source) {
  if (!c.resolution.empty()) {
    source = "--resolution";
    return energy_option(s, "--resolution", c.resolution);
  }
  if (data.info().resolution_J) {
    source = data.info().file;
    return *data.info().resolution_J / s.units.energy_J();
  }
  if (s.work && s.work->resolution) {
    source = s.file + " [work] resolution";
    return *s.work->resolution;
  }
  source = "none";
  if (data.kind == WorkDataKind::level_pairs) return 0;
  throw InputError("resolution", "", "the measurement resolution of the work values: --resolution \"40 h*kHz\", a "
                                     "line '# resolution: 40 h*kHz' in the data file, or [work] resolution in the "
                                     "scenario (0 for exact work values)",
                   "", data.info().file);
}

std::vector<double> internal(const std::vector<double>& joules, const Scenario& s) {
  std::vector<double> out;
  for (double v : joules) out.push_back(v / s.units.energy_J());
  return out;
}

// Bins of the table and the figure: the histogram's own, else uniform bins of width sigma (a
// quarter of the lowest spacing for sigma = 0; at most 200 bins) over the data and the model
// lines above 1e-6 of the total probability, widened by 3 sigma.
std::vector<double> display_edges(const std::vector<double>& work, const std::vector<WorkLine>& lines, double sigma,
                                  double spacing) {
  double lo = *std::min_element(work.begin(), work.end()), hi = *std::max_element(work.begin(), work.end());
  double total = 0;
  for (const auto& l : lines) total += l.probability;
  for (const auto& l : lines)
    if (l.probability > 1e-6 * total) {
      lo = std::min(lo, l.work);
      hi = std::max(hi, l.work);
    }
  lo -= 3 * sigma;
  hi += 3 * sigma;
  double width = sigma > 0 ? sigma : (std::isfinite(spacing) ? spacing / 4 : 0.0);
  if (!(width > 0)) width = (hi - lo) / 50;
  if (!(width > 0)) width = 1;
  width = std::max(width, (hi - lo) / 200);
  // Edges halfway between multiples of the width: lines (sigma = 0) fall inside bins.
  const double start = (std::floor(lo / width - 0.5) + 0.5) * width;
  std::vector<double> edges;
  for (double e = start; edges.empty() || edges.back() < hi; e += width) edges.push_back(e);
  if (edges.size() < 2) edges.push_back(edges.back() + width);
  return edges;
}

struct BinnedView {
  std::vector<double> edges, observed, expected;
};

// Runs in (e_k, e_k+1] and the model's expectation there (model_cdf counts W <= w).
BinnedView bin_samples(const std::vector<double>& work, const std::vector<WorkLine>& lines, double sigma,
                       const std::vector<double>& edges) {
  BinnedView v{edges, std::vector<double>(edges.size() - 1, 0.0), {}};
  for (double w : work) {
    const auto it = std::lower_bound(edges.begin(), edges.end(), w);
    if (it == edges.begin() || it == edges.end()) continue;  // outside: not drawn (edges cover the data)
    v.observed[std::size_t(it - edges.begin()) - 1] += 1;
  }
  for (std::size_t k = 0; k + 1 < edges.size(); ++k)
    v.expected.push_back(double(work.size()) *
                         (model_cdf(lines, sigma, edges[k + 1]) - model_cdf(lines, sigma, edges[k])));
  return v;
}

// exact_samples: work samples with resolution 0 (whose impossible runs may be noisy values).
std::string verdict_of(const WorkComparison& c, bool exact_samples) {
  // p-value thresholds 0.05 and 0.001: common practice for "marginal" and "strong" evidence.
  const double p = c.chi_square.p_value;
  std::string v;
  if (c.impossible_runs > 0)
    v = "INCONSISTENT: " + std::to_string(c.impossible_runs) + " runs where the model has no probability" +
        (exact_samples
             ? " (exact work values lie within their written digits of a work line; noisy ones need the "
               "measurement's resolution: --resolution or a '# resolution:' line)"
             : "");
  else if (p < 1e-3)
    v = "INCONSISTENT: the data are very unlikely under the model (chi-square p = " + short_number(p, 2) + ")";
  else if (p < 0.05)
    v = "MARGINAL: chi-square p = " + short_number(p, 2) + " (below 0.05)";
  else
    v = "CONSISTENT: chi-square p = " + short_number(p, 2);
  if (c.jarzynski && std::isfinite(c.jarzynski->model_lower_kT)) {
    // The data's estimate against the model's own estimate from as many runs (calibrated at any N;
    // the bootstrap interval is not: see JarzynskiEstimate).
    const auto& j = *c.jarzynski;
    const bool inside = j.estimate_kT >= j.model_lower_kT && j.estimate_kT <= j.model_upper_kT;
    v += std::string("; data's Delta F estimate ") + (inside ? "inside" : "OUTSIDE") + " the model's " +
         short_number(100 * j.confidence, 3) + "% range for " + std::to_string(c.runs) + " runs (p = " +
         short_number(j.model_p_value, 2) + ")";
  }
  return v;
}

nlohmann::ordered_json comparison_json(const WorkComparison& c, const Display& d, double beta) {
  using json = nlohmann::ordered_json;
  auto num = [](double v) { return std::isfinite(v) ? json(v) : json(nullptr); };
  json r = {{"runs", c.runs},
            {"model_weight", c.model_weight},
            {"log_likelihood", num(c.log_likelihood)},
            {"log_likelihood_per_run", num(c.log_likelihood_per_run)},
            {"log_likelihood_of", "work samples with resolution > 0: the density per internal energy unit E0; "
                                  "otherwise probabilities"},
            {"impossible_runs", c.impossible_runs},
            {"ambiguous_runs", c.ambiguous_runs},
            {"chi_square",
             {{"statistic", num(c.chi_square.statistic)},
              {"degrees_of_freedom", c.chi_square.degrees_of_freedom},
              {"p_value", c.chi_square.p_value},
              {"bins", c.chi_square.bins},
              {"merged_bins", c.chi_square.merged_bins},
              {"observed", c.chi_square.observed},
              {"expected", c.chi_square.expected}}},
            {"total_variation", c.total_variation},
            {"ks_statistic", num(c.ks_statistic)},
            {"ks_p_value", num(c.ks_p_value)},
            {"model_mass_outside_bins", c.model_mass_outside}};
  if (c.moments) {
    const auto& m = *c.moments;
    const double e2 = d.energy_per * d.energy_per;
    r["moments"] = {{"unit", d.e},
                    {"mean", d.energy(m.mean)},
                    {"mean_error", d.energy(m.mean_error)},
                    {"model_mean", d.energy(m.model_mean)},
                    {"variance", m.variance / e2},
                    {"variance_error", m.variance_error / e2},
                    {"model_variance", m.model_variance / e2}};
  }
  if (c.jarzynski) {
    const auto& j = *c.jarzynski;
    r["jarzynski"] = {{"beta_delta_f", j.estimate_kT},
                      {"lower", num(j.lower_kT)},
                      {"upper", num(j.upper_kT)},
                      {"confidence", j.confidence},
                      {"resamples", j.resamples},
                      {"seed", j.seed},
                      {"model_beta_delta_f", num(j.model_kT)},
                      {"model_with_resolution", num(j.model_with_resolution_kT)},
                      {"difference", num(j.difference_kT)},
                      {"model_estimate_lower", num(j.model_lower_kT)},
                      {"model_estimate_upper", num(j.model_upper_kT)},
                      {"model_estimate_mean", num(j.model_mean_estimate_kT)},
                      {"model_estimate_p_value", num(j.model_p_value)},
                      {"model_experiments", j.experiments},
                      {"model_estimate_of",
                       "the Jarzynski estimate of synthetic data sets of as many runs drawn from the model with the "
                       "resolution: its central range at the confidence level, its mean (mean - "
                       "model_with_resolution is the estimator's bias at this N) and the two-sided p-value of the "
                       "data's estimate; the verdict uses this range, the percentile bootstrap interval (lower, "
                       "upper) covers less than its level at small N"},
                      {"kT", d.energy(1 / beta)},
                      {"unit", "kT (and kT in " + d.e + ")"}};
  }
  return r;
}

void print_compare_report(std::ostream& out, const WorkRun& run, const WorkData& data, const WorkComparison& c,
                          double sigma, const std::string& sigma_source, const std::string& verdict) {
  const Display d = display(run.scenario);
  auto row = [&](const std::string& label, const std::string& text) { print_row(out, label, text); };
  print_scenario_header(out, "compare", run.scenario);
  const DataFileInfo& info = data.info();
  const char* kinds[] = {"work samples", "level pairs", "histogram"};
  row("data", info.file + ": " + kinds[int(data.kind)] + ", " + std::to_string(c.runs) + " runs" +
                  (data.pairs.origin.empty() ? std::string() : " (" + data.pairs.origin + ")") +
                  (info.skipped_rows ? ", " + std::to_string(info.skipped_rows) + " row(s) skipped (keep = 0)"
                                     : std::string()));
  row("resolution", data.kind == WorkDataKind::level_pairs
                        ? std::string("not used (levels are identified)")
                        : short_number(d.energy(sigma), 4) + " " + d.e + " (from " + sigma_source + ")");
  row("model", std::to_string(run.result.distribution.lines.size()) + " work lines holding probability " +
                   short_number(c.model_weight, 10));
  out << '\n';
  // A density's log-likelihood depends on the energy unit: shown for the density per display unit.
  const bool density = data.kind == WorkDataKind::samples && sigma > 0;
  const double shift = density ? std::log(d.energy_per) : 0.0;
  row("log-lik.", short_number(c.log_likelihood + c.runs * shift, 8) + " (" +
                      short_number(c.log_likelihood_per_run + shift, 5) + " per run" +
                      (density ? ", density per " + d.e : std::string(", probabilities")) + ")" +
                      (c.impossible_runs ? ", " + std::to_string(c.impossible_runs) + " impossible runs" : std::string()));
  row("chi-square", short_number(c.chi_square.statistic, 5) + " for " +
                        std::to_string(c.chi_square.degrees_of_freedom) + " degrees of freedom (" +
                        std::to_string(c.chi_square.bins) + " bins merged to " +
                        std::to_string(c.chi_square.merged_bins) + " with >= 5 expected), p = " +
                        short_number(c.chi_square.p_value, 3));
  row("distance", "total variation " + short_number(c.total_variation, 3) +
                      (std::isfinite(c.ks_statistic) ? ", Kolmogorov-Smirnov D = " + short_number(c.ks_statistic, 3) +
                                                           (std::isfinite(c.ks_p_value)
                                                                ? " (p = " + short_number(c.ks_p_value, 3) + ")"
                                                                : std::string(" (no p-value: the model has lines)"))
                                                     : std::string()));
  if (data.kind == WorkDataKind::histogram)
    row("", "model probability outside the data's bins: " + short_number(c.model_mass_outside, 3));
  if (c.moments) {
    const auto& m = *c.moments;
    const double e2 = d.energy_per * d.energy_per;
    row("<W>", short_number(d.energy(m.mean), 6) + " +- " + short_number(d.energy(m.mean_error), 2) + " " + d.e +
                   " (model " + short_number(d.energy(m.model_mean), 6) + ")");
    row("var(W)", short_number(m.variance / e2, 6) + " +- " + short_number(m.variance_error / e2, 2) + " (" + d.e +
                      ")^2 (model, with resolution: " + short_number(m.model_variance / e2, 6) + ")");
  }
  if (c.jarzynski) {
    const auto& j = *c.jarzynski;
    const double kT = d.energy(1 / run.result.distribution.beta);
    row("Delta F", "data " + short_number(j.estimate_kT, 5) + " kT, " + short_number(100 * j.confidence, 3) +
                       "% bootstrap interval [" + short_number(j.lower_kT, 5) + ", " + short_number(j.upper_kT, 5) +
                       "] kT (" + std::to_string(j.resamples) + " resamples, seed " + std::to_string(j.seed) + ")");
    row("", "model " + short_number(j.model_kT, 5) + " kT; with the resolution's -beta^2 sigma^2/2: " +
                short_number(j.model_with_resolution_kT, 5) + " kT; kT = " + short_number(kT, 5) + " " + d.e);
    if (std::isfinite(j.model_lower_kT))
      row("", "the model's estimate from " + std::to_string(c.runs) + " runs: " + short_number(100 * j.confidence, 3) +
                  "% range [" + short_number(j.model_lower_kT, 5) + ", " + short_number(j.model_upper_kT, 5) +
                  "] kT, mean " + short_number(j.model_mean_estimate_kT, 5) + " kT (" +
                  std::to_string(j.experiments) + " synthetic data sets); the data's estimate: p = " +
                  short_number(j.model_p_value, 2));
  } else if (data.kind == WorkDataKind::histogram) {
    row("Delta F", "not estimated: a histogram does not fix <exp(-beta W)> inside a bin");
  } else {
    row("Delta F", "not estimated: the initial state is not thermal");
  }
  for (const auto& w : work_warnings(run)) out << "  warning: model: " << w << '\n';
  if (c.ambiguous_runs > 0)
    out << "  warning: data: " << c.ambiguous_runs
        << " exact work values lie within their written digits of more than one work line; each was taken at the "
           "nearest: write more digits\n";
  out << "\n  verdict     " << verdict << '\n';
}

}  // namespace

std::vector<std::string> compare_output_names() {
  return {"compare.csv",        "compare_summary.json", "compare.png", "compare.svg",
          "compare_models.csv", "compare_models.png",   "compare_models.svg"};
}

CompareTaskOutcome compare_task(const Scenario& scenario, const CompareSettings& settings, const TaskHooks& hooks,
                                const std::function<void()>& checked) {
  WorkData data = read_work_data(settings.data);
  std::string sigma_source;
  const double sigma = resolution_for(settings, scenario, data, sigma_source);
  if (checked) checked();
  ScenarioWork work = model_work(scenario, hooks);
  const WorkRun run = work.run(scenario);
  WorkComparison comparison;
  const WorkResult& r = run.result;
  const std::vector<WorkLine>& lines = r.distribution.lines;

  CompareOptions options;
  options.beta = r.distribution.beta;
  options.resolution = sigma;
  options.resamples = settings.resamples;
  options.seed = settings.seed;
  options.confidence = settings.confidence;
  options.model_free_energy = r.distribution.free_energy_change;
  std::vector<double> run_work;  // work per run for the table and figure (samples, level pairs)
  BinnedView view;
  try {
    switch (data.kind) {
      case WorkDataKind::samples:
        run_work = internal(data.samples.work_J, scenario);
        options.precision = internal(data.samples.precision_J, scenario);
        comparison = compare_samples(lines, run_work, options);
        break;
      case WorkDataKind::level_pairs:
        options.resolution = 0;
        try {
          comparison = compare_level_pairs(r.forward, data.pairs.runs, options);
        } catch (const InputError& e) {
          // "runs[i].initial": point at the data file's line of run i
          const auto open = e.key.find('['), close = e.key.find(']');
          if (e.key.rfind("runs[", 0) != 0 || close == std::string::npos) throw;
          const std::size_t i = std::stoul(e.key.substr(open + 1, close - open - 1));
          const std::string column = e.key.substr(close + 2);
          throw InputError(column, e.found,
                           e.expected + " (the model keeps " + std::to_string(r.forward.transitions.initial_levels()) +
                               " initial and " + std::to_string(r.forward.transitions.final_levels()) +
                               " final levels)",
                           "", data.info().file, i < data.pairs.lines.size() ? data.pairs.lines[i] : 0, 0);
        }
        for (const auto& p : data.pairs.runs)
          run_work.push_back(r.forward.final_energies(p.final) - r.forward.initial_energies(p.initial));
        break;
      case WorkDataKind::histogram: {
        const auto edges = internal(data.histogram.edges_J, scenario);
        comparison = compare_histogram(lines, edges, data.histogram.counts, options);
        view = bin_samples({}, lines, sigma, edges);
        view.observed = data.histogram.counts;
        double runs = 0, covered = 0;
        for (double c : data.histogram.counts) runs += c;
        for (std::size_t k = 0; k + 1 < edges.size(); ++k)
          covered += model_cdf(lines, sigma, edges[k + 1]) - model_cdf(lines, sigma, edges[k]);
        for (std::size_t k = 0; k + 1 < edges.size(); ++k)
          view.expected[k] = runs / covered *
                             (model_cdf(lines, sigma, edges[k + 1]) - model_cdf(lines, sigma, edges[k]));
        break;
      }
    }
  } catch (const PhysicsError& e) {
    throw PhysicsError("compare " + data.info().file + " with " + scenario.file + ": " + e.what());
  }
  if (data.kind != WorkDataKind::histogram)
    view = bin_samples(run_work, lines, sigma, display_edges(run_work, lines, sigma, lowest_spacing(r)));
  std::string verdict = verdict_of(comparison, data.kind == WorkDataKind::samples && !(sigma > 0));
  std::optional<ModelChoiceOutcome> choice;
  if (!settings.models.against.empty()) choice = choose_between(run, data, sigma, settings.models, hooks);
  std::optional<CalibratedLikelihood> calibrated;
  if (has_calibration(scenario, settings.uncertainty))  // a fit's file, or the scenario's [uncertainty]
    calibrated = calibrated_likelihood(run, data, sigma, settings.models, settings.uncertainty, hooks);
  return {scenario,
          std::move(work),
          std::move(data),
          sigma,
          std::move(sigma_source),
          std::move(comparison),
          std::move(verdict),
          std::move(view.edges),
          std::move(view.observed),
          std::move(view.expected),
          std::move(choice),
          std::move(calibrated)};
}

std::vector<NamedTable> task_tables(const CompareTaskOutcome& o) {
  const Display d = display(o.scenario);
  CsvTable table;
  table.columns = {{"lower" + d.e_col, {}}, {"upper" + d.e_col, {}}, {"observed_runs", {}}, {"expected_runs", {}},
                   {"pull", {}}};
  for (std::size_t k = 0; k + 1 < o.edges.size(); ++k) {
    const double obs = o.observed[k], e = o.expected[k];
    const std::vector<double> values = {d.energy(o.edges[k]), d.energy(o.edges[k + 1]), obs, e,
                                        e > 0 ? (obs - e) / std::sqrt(e) : std::nan("")};
    for (std::size_t c = 0; c < values.size(); ++c) table.columns[c].values.push_back(values[c]);
  }
  table.comments = {"measured runs of " + o.data.info().file + " against the model of " + o.scenario.file +
                        " (`trapwork compare`), on bins (lower, upper]",
                    "expected_runs: the model with resolution " + short_number(d.energy(o.sigma), 4) + " " + d.e +
                        "; pull = (observed - expected) / sqrt(expected)",
                    "the chi-square test uses its own bins (merged to >= 5 expected runs): see compare_summary.json"};
  if (o.choice) return {{"compare.csv", table}, {"compare_models.csv", model_choice_table(*o.choice)}};
  return {{"compare.csv", table}};
}

nlohmann::ordered_json task_summary(const CompareTaskOutcome& o) {
  const Display d = display(o.scenario);
  const WorkData& data = o.data;
  nlohmann::ordered_json summary = {{"command", "compare"},
          {"scenario", o.scenario.file},
          {"data", data.info().file},
          {"data_kind", data.kind == WorkDataKind::samples       ? "work samples"
                        : data.kind == WorkDataKind::level_pairs ? "level pairs"
                                                                 : "histogram"},
          {"skipped_rows", data.info().skipped_rows},
          {"data_origin", data.pairs.origin.empty() ? "one row per run" : data.pairs.origin},
          {"resolution", d.energy(o.sigma)},
          {"resolution_source", o.sigma_source},
          {"energy_unit", d.e},
          {"comparison", comparison_json(o.comparison, d, o.work.result().distribution.beta)},
          {"verdict", o.verdict}};
  if (o.choice) summary["model_choice"] = model_choice_json(*o.choice);
  if (o.calibrated) summary["calibration_uncertainty"] = calibrated_likelihood_json(*o.calibrated);
  return with_provenance(summary, o.scenario);
}

std::vector<NamedText> task_texts(const CompareTaskOutcome&) { return {}; }

std::vector<NamedFigure> task_figures(const CompareTaskOutcome& o) {
  const Display d = display(o.scenario);
  const WorkResult& r = o.work.result();
  const double sigma = o.sigma;
  ComparisonFigure figure;
  figure.title = "measured work against the model, resolution " + short_number(d.energy(sigma), 3) + " " + d.e;
  figure.work_label = "work W (" + d.e + ")";
  figure.count_label = "runs per bin";
  for (double e : o.edges) figure.edges.push_back(d.energy(e));
  figure.observed = o.observed;
  figure.expected = o.expected;
  if (sigma > 0) {
    const double width = o.edges[1] - o.edges[0];
    const int n = 801;
    std::vector<double> w(n);
    for (int i = 0; i < n; ++i) w[std::size_t(i)] = o.edges.front() + (o.edges.back() - o.edges.front()) * i / (n - 1);
    const auto rho = broadened_density(r.distribution, sigma, w);
    double total = 0;
    for (double x : o.observed) total += x;
    for (int i = 0; i < n; ++i) {
      figure.curve_work.push_back(d.energy(w[std::size_t(i)]));
      figure.curve.push_back(rho[std::size_t(i)] / r.distribution.resolved_weight * total * width);
    }
  }
  if (o.comparison.moments) {
    figure.model_mean = d.energy(o.comparison.moments->model_mean);
    figure.data_mean = d.energy(o.comparison.moments->mean);
  }
  if (o.choice && !model_choice_figure(*o.choice).curves.empty())
    return {{"compare", figure}, {"compare_models", model_choice_figure(*o.choice)}};
  return {{"compare", figure}};
}

std::vector<fs::path> write_task_outputs(const fs::path& folder, const CompareTaskOutcome& o) {
  return write_outputs(folder, task_tables(o), "compare_summary.json", task_summary(o), task_texts(o), task_figures(o));
}

void print_task_report(std::ostream& out, const CompareTaskOutcome& o) {
  print_compare_report(out, o.run(), o.data, o.comparison, o.sigma, o.sigma_source, o.verdict);
  if (o.choice) print_model_choice(out, *o.choice);
  if (o.calibrated) print_calibrated_likelihood(out, *o.calibrated);
}

}  // namespace trapwork
