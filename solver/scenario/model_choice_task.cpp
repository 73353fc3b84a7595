// `trapwork compare --against` and `trapwork plan --against` (model_choice_task.hpp): scenarios
// as candidate models of one data set, through solver/model_choice.hpp.
#include "solver/scenario/model_choice_task.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <limits>

#include "solver/compare.hpp"
#include "solver/errors.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

namespace {

constexpr double most_synthetic_runs = 2e8;  // about a minute of draws (measured: ~0.15 us a run)

std::string stem_of(const Scenario& s) {
  const std::string stem = std::filesystem::path(s.file).stem().string();
  return stem.empty() ? s.file : stem;
}

// A model's work lines in the main scenario's internal energy unit.
std::vector<WorkLine> lines_in(const WorkRun& run, const Scenario& main) {
  const double factor = run.scenario.units.energy_J() / main.units.energy_J();
  std::vector<WorkLine> lines = run.result.distribution.lines;
  for (auto& l : lines) l.work *= factor;
  return lines;
}

// Level pairs: categories (m, n) over the largest matrix; p_m P(m -> n) of each model, 0 outside.
struct PairCells {
  int rows = 0, cols = 0;
};
PairCells pair_cells(const std::vector<const WorkInput*>& inputs) {
  PairCells c;
  for (const auto* in : inputs) {
    c.rows = std::max(c.rows, int(in->transitions.probability.rows()));
    c.cols = std::max(c.cols, int(in->transitions.probability.cols()));
  }
  return c;
}
std::vector<double> pair_probabilities(const WorkInput& in, const PairCells& c) {
  std::vector<double> p(std::size_t(c.rows) * std::size_t(c.cols), 0.0);
  const auto& t = in.transitions.probability;
  for (int i = 0; i < int(t.rows()); ++i)
    for (int f = 0; f < int(t.cols()); ++f)
      p[std::size_t(i) * std::size_t(c.cols) + std::size_t(f)] = in.initial_weights[std::size_t(i)] * t(i, f);
  return p;
}

// Exact work values: categories are the lines of all models merged within `tolerance`, plus
// one last category no model has (runs matching no line).
// precision: per value, the rounding its written digits allow (as CompareOptions::precision:
// a value within the larger of it and `tolerance` of a category falls in the nearest such one).
void exact_value_categories(const std::vector<std::vector<WorkLine>>& models, const std::vector<double>& work,
                            const std::vector<double>& precision, double tolerance, CandidateModels& m,
                            MeasuredRuns& data) {
  std::vector<double> all;
  for (const auto& lines : models)
    for (const auto& l : lines) all.push_back(l.work);
  std::sort(all.begin(), all.end());
  std::vector<std::pair<double, double>> groups;  // [first, last] work of each category
  for (double w : all)
    if (groups.empty() || w - groups.back().second > tolerance)
      groups.push_back({w, w});
    else
      groups.back().second = w;
  // the nearest category within tol of w (its lines' span), or groups.size() for none
  auto category = [&](double w, double tol) {
    auto it = std::lower_bound(groups.begin(), groups.end(), w - tol,
                               [](const std::pair<double, double>& g, double x) { return g.second < x; });
    std::size_t best = groups.size();
    double nearest = std::numeric_limits<double>::infinity();
    for (; it != groups.end() && it->first <= w + tol; ++it) {
      const double d = std::max({0.0, it->first - w, w - it->second});
      if (d < nearest) {
        nearest = d;
        best = std::size_t(it - groups.begin());
      }
    }
    return best;
  };
  for (const auto& lines : models) {
    std::vector<double> p(groups.size() + 1, 0.0);
    for (const auto& l : lines) p[category(l.work, tolerance)] += l.probability;
    m.categories.push_back(std::move(p));
  }
  data.counts.assign(groups.size() + 1, 0.0);
  for (std::size_t i = 0; i < work.size(); ++i) {
    const double digits = i < precision.size() ? precision[i] : std::numeric_limits<double>::quiet_NaN();
    data.counts[category(work[i], std::isnan(digits) ? tolerance : std::max(tolerance, digits * (1 + 1e-12)))] += 1;
  }
}

std::string percent(double share) {
  return short_number(100 * share, share > 0.999 ? 5 : 3) + " %";
}

std::string verdict_text(const PairTest& t, const std::vector<std::string>& names, double confidence) {
  const std::string& a = names[std::size_t(t.a)];
  const std::string& b = names[std::size_t(t.b)];
  if (t.sets == 0)
    return "not calibrated (--calibration 0): ln(L_" + a + "/L_" + b + ") = " + short_number(t.statistic, 4) +
           " only";
  const double floor = 1.0 / (t.sets + 1);
  auto confidence_text = [&](double p) {
    return (p <= floor ? ">= " : "") + percent(1 - p) + " confidence";
  };
  auto p_text = [&](double p) { return (p <= floor ? "p <= " : "p = ") + short_number(p, 3); };
  const std::string ps = "(" + p_text(t.p_b) + " under " + b + ", " + p_text(t.p_a) + " under " + a + ", from " +
                         std::to_string(t.sets) + " synthetic data sets each)";
  auto atypical = [&](const std::string& m, double p) {
    return t.atypical ? ", BUT the ratio lies beyond what " + m + " gives too (" + p_text(p) + " of a ratio this far out " +
                            "under " + m + "): the data may fit neither model; check each one's goodness of fit"
                      : std::string();
  };
  switch (t.decision) {
    case Decision::favours_a:
      return "the data favour " + a + " over " + b + " at " + confidence_text(t.p_b) + " " + ps +
             atypical(a, t.p_a_beyond);
    case Decision::favours_b:
      return "the data favour " + b + " over " + a + " at " + confidence_text(t.p_a) + " " + ps +
             atypical(b, t.p_b_beyond);
    case Decision::rejects_both:
      return "the data fit neither " + a + " nor " + b + " at " + percent(confidence) + " confidence " + ps;
    case Decision::cannot_tell:
      break;
  }
  std::string v = "the data cannot tell " + a + " from " + b + " at " + percent(confidence) + " confidence " + ps;
  if (floor > 1 - confidence)
    v += "; with " + std::to_string(t.sets) + " synthetic sets no p-value can go below " + short_number(floor, 3) +
         ": raise --calibration";
  return v;
}

}  // namespace

ModelChoiceOutcome choose_between(const WorkRun& main_run, const WorkData& data, double sigma,
                                  const ModelChoiceSettings& settings, const TaskHooks& hooks) {
  const Scenario& main = main_run.scenario;
  const std::size_t n_models = settings.against.size() + 1;
  if (!settings.fitted_parameters.empty() && settings.fitted_parameters.size() != n_models)
    throw InputError("--fitted-parameters", std::to_string(settings.fitted_parameters.size()) + " numbers",
                     "one number per model, the compared scenario first (" + std::to_string(n_models) + ")");
  if (!settings.prior.empty() && settings.prior.size() != n_models)
    throw InputError("--prior", std::to_string(settings.prior.size()) + " weights",
                     "one prior weight per model, the compared scenario first (" + std::to_string(n_models) + ")");
  if (settings.calibration < 0)
    throw InputError("--calibration", std::to_string(settings.calibration), "a number of synthetic sets >= 0");
  double runs = 0;
  switch (data.kind) {
    case WorkDataKind::samples: runs = double(data.samples.work_J.size()); break;
    case WorkDataKind::level_pairs: runs = double(data.pairs.runs.size()); break;
    case WorkDataKind::histogram:
      for (double c : data.histogram.counts) runs += c;
      break;
  }
  const double draws = runs * double(settings.calibration) * 2 * double(n_models - 1);
  if (draws > most_synthetic_runs)
    throw InputError("--calibration", std::to_string(settings.calibration),
                     "at most " + short_number(most_synthetic_runs, 2) + " synthetic runs in all (" +
                         short_number(runs, 6) + " runs x sets x 2 x models gives " + short_number(draws, 3) + ")",
                     "lower --calibration");

  ModelChoiceOutcome o;
  o.files.push_back(main.file);
  o.names.push_back(stem_of(main));
  o.warnings.push_back(work_warnings(main_run));
  std::vector<std::vector<WorkLine>> lines{lines_in(main_run, main)};
  std::vector<WorkInput> forward{main_run.result.forward};
  for (const Scenario& s : settings.against) {
    ScenarioWork w = model_work(s, hooks, "compare --against");
    const WorkRun run = w.run(s);
    o.files.push_back(s.file);
    o.names.push_back(stem_of(s));
    o.warnings.push_back(work_warnings(run));
    lines.push_back(lines_in(run, main));
    forward.push_back(run.result.forward);
  }
  for (std::size_t j = 1; j < o.names.size(); ++j)  // names must tell the models apart
    if (std::count(o.names.begin(), o.names.end(), o.names[j]) > 1) o.names[j] += "#" + std::to_string(j + 1);

  const Display d = display(main);
  CandidateModels models;
  MeasuredRuns measured;
  switch (data.kind) {
    case WorkDataKind::samples: {
      for (double w : data.samples.work_J) measured.work.push_back(w / main.units.energy_J());
      if (sigma > 0) {
        models.lines = lines;
        models.resolution = sigma;
        o.form = "work values with resolution " + short_number(d.energy(sigma), 4) + " " + d.e;
        o.display_shift = std::log(d.energy_per);
      } else {
        std::vector<double> precision;
        for (double p : data.samples.precision_J) precision.push_back(p / main.units.energy_J());
        exact_value_categories(lines, measured.work, precision, CompareOptions{}.match_tolerance, models, measured);
        measured.work.clear();
        o.form = "exact work values (each line of the models a category)";
      }
      break;
    }
    case WorkDataKind::level_pairs: {
      std::vector<const WorkInput*> inputs;
      for (const auto& f : forward) inputs.push_back(&f);
      const PairCells cells = pair_cells(inputs);
      for (const auto& f : forward) models.categories.push_back(pair_probabilities(f, cells));
      measured.counts.assign(std::size_t(cells.rows) * std::size_t(cells.cols), 0.0);
      for (const auto& p : data.pairs.runs)  // compare_level_pairs checked them against the first model
        measured.counts[std::size_t(p.initial) * std::size_t(cells.cols) + std::size_t(p.final)] += 1;
      o.form = "level pairs (initial, final) per run";
      break;
    }
    case WorkDataKind::histogram: {
      std::vector<double> edges;
      for (double e : data.histogram.edges_J) edges.push_back(e / main.units.energy_J());
      for (const auto& l : lines) {
        std::vector<double> p;
        for (std::size_t k = 0; k + 1 < edges.size(); ++k)
          p.push_back(model_cdf(l, sigma, edges[k + 1]) - model_cdf(l, sigma, edges[k]));
        models.categories.push_back(std::move(p));
      }
      measured.counts = data.histogram.counts;
      o.form = "histogram bins (each model conditioned on the bins' range), resolution " +
               short_number(d.energy(sigma), 4) + " " + d.e;
      break;
    }
  }
  ModelChoiceOptions options;
  options.synthetic_sets = settings.calibration;
  options.seed = settings.seed;
  options.confidence = settings.confidence;
  options.fitted_parameters = settings.fitted_parameters;
  options.prior = settings.prior;
  try {
    o.choice = choose_model(models, measured, options);
  } catch (const PhysicsError& e) {
    std::string files;
    for (const auto& f : o.files) files += (files.empty() ? "" : ", ") + f;
    throw PhysicsError("compare " + data.info().file + " with " + files + ": " + e.what());
  }
  for (const auto& t : o.choice.tests) o.verdicts.push_back(verdict_text(t, o.names, settings.confidence));
  return o;
}

CsvTable model_choice_table(const ModelChoiceOutcome& o) {
  const ModelChoice& c = o.choice;
  CsvTable t;
  t.columns = {{"model", {}},     {"fitted_parameters", {}}, {"log_likelihood", {}}, {"aic", {}}, {"bic", {}},
               {"prior", {}},     {"posterior", {}},         {"log_ratio_to_first", {}}, {"p_under_this", {}},
               {"p_under_first", {}}};
  for (std::size_t j = 0; j < o.names.size(); ++j) {
    const double ll = c.log_likelihood[j] + c.runs * o.display_shift;
    const double shift2 = 2 * c.runs * o.display_shift;
    const PairTest* test = j > 0 ? &c.tests[j - 1] : nullptr;
    const std::vector<double> v = {double(j + 1),
                                   double(c.fitted_parameters[j]),
                                   ll,
                                   c.aic[j] - shift2,
                                   c.bic[j] - shift2,
                                   c.prior[j],
                                   c.posterior[j],
                                   test ? -test->statistic : 0.0,
                                   test ? test->p_b : std::nan(""),
                                   test ? test->p_a : std::nan("")};
    for (std::size_t k = 0; k < v.size(); ++k) t.columns[k].values.push_back(v[k]);
  }
  std::string models;
  for (std::size_t j = 0; j < o.names.size(); ++j)
    models += (j ? ", " : "") + std::to_string(j + 1) + " = " + o.files[j];
  t.comments = {"candidate models of one data set (`trapwork compare --against`): " + models,
                "data: " + o.form + "; log-likelihoods" +
                    (o.display_shift != 0 ? " of densities per display energy unit" : std::string(" of probabilities")),
                "log_ratio_to_first = ln(L_this / L_first); p_under_this: share of synthetic sets from this model "
                "with a ratio in favour of the first model at least as large as the data's (small: the data "
                "disfavour this model); p_under_first: the same from the first model the other way",
                std::string("posterior: prior x ") +
                    (c.bic_odds ? "exp(-BIC/2) (Schwarz's approximation: parameters fitted to these data)"
                                : "likelihood (the models are fixed: exact Bayes factors)")};
  return t;
}

nlohmann::ordered_json model_choice_json(const ModelChoiceOutcome& o) {
  using json = nlohmann::ordered_json;
  const ModelChoice& c = o.choice;
  auto num = [](double v) { return std::isfinite(v) ? json(v) : json(nullptr); };
  json models = json::array();
  for (std::size_t j = 0; j < o.names.size(); ++j)
    models.push_back({{"scenario", o.files[j]},
                      {"name", o.names[j]},
                      {"fitted_parameters", c.fitted_parameters[j]},
                      {"log_likelihood", num(c.log_likelihood[j] + c.runs * o.display_shift)},
                      {"aic", num(c.aic[j] - 2 * c.runs * o.display_shift)},
                      {"bic", num(c.bic[j] - 2 * c.runs * o.display_shift)},
                      {"prior", c.prior[j]},
                      {"posterior", c.posterior[j]},
                      {"warnings", o.warnings[j]}});
  json tests = json::array();
  for (std::size_t k = 0; k < c.tests.size(); ++k) {
    const auto& t = c.tests[k];
    const char* decisions[] = {"favours_a", "favours_b", "cannot_tell", "rejects_both"};
    tests.push_back({{"a", o.names[std::size_t(t.a)]},
                     {"b", o.names[std::size_t(t.b)]},
                     {"log_likelihood_ratio", num(t.statistic)},
                     {"synthetic_sets", t.sets},
                     {"p_under_b", num(t.p_b)},
                     {"p_under_a", num(t.p_a)},
                     {"p_beyond_under_a", num(t.p_a_beyond)},
                     {"p_beyond_under_b", num(t.p_b_beyond)},
                     {"atypical", t.atypical},
                     {"posterior_odds_a_to_b", num(c.posterior[std::size_t(t.a)] / c.posterior[std::size_t(t.b)])},
                     {"prior_odds_a_to_b", c.prior[std::size_t(t.a)] / c.prior[std::size_t(t.b)]},
                     {"decision", decisions[int(t.decision)]},
                     {"verdict", o.verdicts[k]}});
  }
  return {{"data_form", o.form},
          {"log_likelihood_of", o.display_shift != 0 ? "densities per display energy unit" : "probabilities"},
          {"method", "log-likelihood ratio T = ln L_a - ln L_b of fixed models (most powerful test, Neyman-Pearson); "
                     "p-values by parametric bootstrap: T of synthetic data sets of the same size from each model; "
                     "Wilks' chi-square limit not used (nothing fitted to these data)"},
          {"confidence", c.confidence},
          {"posterior_from", c.bic_odds ? "prior x exp(-BIC/2)" : "prior x likelihood"},
          {"models", models},
          {"tests", tests}};
}

SweepFigure model_choice_figure(const ModelChoiceOutcome& o) {
  SweepFigure f;
  f.title = "likelihood ratio of the data against synthetic data sets from each model";
  f.x_label = "ln(L_A / L_B)";
  f.y_label = "share of synthetic sets per bin";
  for (const auto& t : o.choice.tests) {
    if (t.sets == 0) continue;
    const std::string a = o.names[std::size_t(t.a)], b = o.names[std::size_t(t.b)];
    double lo = std::min({t.synthetic_a.front(), t.synthetic_b.front(), t.statistic});
    double hi = std::max({t.synthetic_a.back(), t.synthetic_b.back(), t.statistic});
    if (!std::isfinite(lo) || !std::isfinite(hi)) continue;  // impossible runs: no histogram to draw
    if (!(hi > lo)) hi = lo + 1;
    const int bins = 40;
    const double width = (hi - lo) / bins;
    std::vector<SweepCurve> curves;
    double top = 0;
    for (const auto* sample : {&t.synthetic_a, &t.synthetic_b}) {
      std::vector<double> h(bins, 0.0);
      for (double x : *sample) h[std::size_t(std::clamp(int((x - lo) / width), 0, bins - 1))] += 1.0 / double(sample->size());
      SweepCurve c{"from " + (sample == &t.synthetic_a ? a : b) + " (" + std::to_string(t.sets) + " sets)", {}, {}};
      for (int k = 0; k < bins; ++k) {
        c.x.push_back(lo + k * width);
        c.y.push_back(h[std::size_t(k)]);
        c.x.push_back(lo + (k + 1) * width);
        c.y.push_back(h[std::size_t(k)]);
        top = std::max(top, h[std::size_t(k)]);
      }
      curves.push_back(std::move(c));
    }
    curves.push_back({"the data: ln(L_" + a + "/L_" + b + ") = " + short_number(t.statistic, 4),
                      {t.statistic, t.statistic},
                      {0.0, top}});
    if (f.curves.empty()) {
      f.curves = std::move(curves);
      f.x_label = "ln(L_" + a + " / L_" + b + ")";
    } else {
      f.panels.push_back({"share, " + a + " against " + b, {}, std::move(curves), false});
    }
  }
  return f;
}

void print_model_choice(std::ostream& out, const ModelChoiceOutcome& o) {
  const ModelChoice& c = o.choice;
  out << "\n  model choice (" << o.form << ")\n";
  for (std::size_t j = 0; j < o.names.size(); ++j) {
    const double shift2 = 2 * c.runs * o.display_shift;
    print_row(out, std::string(1, char('A' + std::min<std::size_t>(j, 25))),
              o.names[j] + ": ln L = " + short_number(c.log_likelihood[j] + c.runs * o.display_shift, 8) + ", AIC " +
                  short_number(c.aic[j] - shift2, 8) + ", BIC " + short_number(c.bic[j] - shift2, 8) + " (k = " +
                  std::to_string(c.fitted_parameters[j]) + "); prior " + short_number(c.prior[j], 3) +
                  ", posterior " + short_number(c.posterior[j], 4));
    for (const auto& w : o.warnings[j]) out << "  warning: " << o.names[j] << ": " << w << '\n';
  }
  print_row(out, "",
            c.bic_odds ? "posterior = prior x exp(-BIC/2), Schwarz's approximation (k parameters fitted to these data)"
                       : "posterior = prior x likelihood: the models are fixed, so the Bayes factor is the likelihood "
                         "ratio");
  for (std::size_t k = 0; k < c.tests.size(); ++k) {
    const auto& t = c.tests[k];
    const std::string a = o.names[std::size_t(t.a)], b = o.names[std::size_t(t.b)];
    print_row(out, "test", "ln(L_" + a + "/L_" + b + ") = " + short_number(t.statistic, 5) + ", posterior odds " +
                               short_number(c.posterior[std::size_t(t.a)] / c.posterior[std::size_t(t.b)], 4) +
                               " for prior odds " + short_number(c.prior[std::size_t(t.a)] / c.prior[std::size_t(t.b)], 4));
    print_row(out, "verdict", o.verdicts[k]);
  }
  if (std::any_of(c.fitted_parameters.begin(), c.fitted_parameters.end(), [](int k) { return k > 0; }))
    print_row(out, "", "the synthetic sets keep the models fixed (not refitted): with k > 0 the p-values are approximate");
}

// ---- plan --against ---------------------------------------------------------------------------

DecisionPlanOutcome decision_plan(const WorkRun& main_run, const DecisionPlanSettings& settings,
                                  const TaskHooks& hooks) {
  const Scenario& main = main_run.scenario;
  if (settings.runs.empty()) throw InputError("--runs", "", "at least one number of runs");
  for (auto n : settings.runs)
    if (n < 1) throw InputError("--runs", std::to_string(n), "numbers of runs >= 1");
  if (!(settings.power > 0 && settings.power < 1))
    throw InputError("--power", std::to_string(settings.power), "a probability between 0 and 1");
  if (!(settings.confidence > 0 && settings.confidence < 1))
    throw InputError("--decision-confidence", std::to_string(settings.confidence), "a confidence between 0 and 1");
  double draws = 0;
  for (auto n : settings.runs) draws += 4.0 * double(n) * settings.experiments;
  if (draws > most_synthetic_runs)
    throw InputError("--experiments", std::to_string(settings.experiments),
                     "at most " + short_number(most_synthetic_runs, 2) + " synthetic runs for the table (4 x runs x "
                     "experiments gives " + short_number(draws, 3) + ")",
                     "lower --experiments or --runs");
  DecisionPlanOutcome o;
  o.settings = settings;
  o.settings.against = Scenario{};
  o.resolution = settings.resolution;
  o.files = {main.file, settings.against.file};
  o.names = {stem_of(main), stem_of(settings.against)};
  if (o.names[1] == o.names[0]) o.names[1] += "#2";
  ScenarioWork other = model_work(settings.against, hooks, "plan --against");
  const WorkRun other_run = other.run(settings.against);
  const Display d = display(main);
  CandidateModels models;
  if (settings.resolution > 0) {
    models.lines = {lines_in(main_run, main), lines_in(other_run, main)};
    models.resolution = settings.resolution;
    o.form = "work values with resolution " + short_number(d.energy(settings.resolution), 4) + " " + d.e;
  } else {
    const PairCells cells = pair_cells({&main_run.result.forward, &other_run.result.forward});
    models.categories = {pair_probabilities(main_run.result.forward, cells),
                         pair_probabilities(other_run.result.forward, cells)};
    o.form = "level pairs (initial, final) per run, no resolution";
  }
  DecisionOptions options;
  options.experiments = settings.experiments;
  options.seed = settings.seed;
  options.confidence = settings.confidence;
  if (hooks.stage) hooks.stage("synthetic experiments");
  for (std::size_t i = 0; i < settings.runs.size(); ++i) {
    o.table.push_back(decision_power(models, 0, 1, settings.runs[i], options));
    if (hooks.progress) hooks.progress(double(i + 1) / double(settings.runs.size()));
  }
  o.normal_runs = normal_runs_to_decide(models, 0, 1, settings.power, settings.confidence, settings.seed);
  if (settings.find_runs && std::isfinite(o.normal_runs)) {
    // The search is bounded by the synthetic runs it may draw: N up to that bound / (4 experiments).
    const auto bound = std::int64_t(std::min(1e9, most_synthetic_runs / (4.0 * settings.experiments)));
    o.needed = runs_to_decide(models, 0, 1, settings.power, options,
                              std::max<std::int64_t>(8, std::int64_t(o.normal_runs / 4)), std::max<std::int64_t>(bound, 8));
  }
  return o;
}

CsvTable decision_plan_table(const DecisionPlanOutcome& o) {
  CsvTable t;
  t.columns = {{"runs", {}},      {"experiments", {}},    {"power_reject_b", {}}, {"power_reject_a", {}},
               {"size_b", {}},    {"size_a", {}},         {"correct_if_a", {}},   {"correct_if_b", {}},
               {"normal_power_reject_b", {}}, {"normal_power_reject_a", {}}, {"threshold_b", {}}, {"threshold_a", {}}};
  for (const auto& p : o.table) {
    const std::vector<double> v = {double(p.runs), double(p.experiments), p.power_a,        p.power_b,
                                   p.size_b,       p.size_a,              p.correct_a,      p.correct_b,
                                   p.normal_power_a, p.normal_power_b,    p.threshold_b,    p.threshold_a};
    for (std::size_t k = 0; k < v.size(); ++k) t.columns[k].values.push_back(v[k]);
  }
  const std::string a = o.names[0], b = o.names[1];
  t.comments = {"how often N runs tell A = " + o.files[0] + " from B = " + o.files[1] +
                    " (`trapwork plan --against`), by synthetic experiments from each model (seed " +
                    std::to_string(o.settings.seed) + "); data: " + o.form,
                "likelihood-ratio test at confidence " + short_number(o.settings.confidence, 4) +
                    ": power_reject_b = P(B rejected | A true), power_reject_a = P(A rejected | B true); size_b, size_a: "
                    "the same when the rejected model is true (1 - confidence up to resampling)",
                "correct_if_a, correct_if_b: the likelier model is the true one; normal_*: the normal approximation; "
                "thresholds in ln(L_A/L_B)"};
  return t;
}

nlohmann::ordered_json decision_plan_json(const DecisionPlanOutcome& o) {
  using json = nlohmann::ordered_json;
  json needed = nullptr;
  if (o.needed) {
    needed = {{"runs", o.needed->reached ? json(o.needed->runs) : json(nullptr)},
              {"reached", o.needed->reached},
              {"power_reject_b", o.needed->at.power_a},
              {"power_reject_a", o.needed->at.power_b},
              {"evaluations", o.needed->evaluations}};
    if (!o.needed->reached) needed["largest_runs_tried"] = o.needed->runs;
  }
  return {{"a", o.files[0]},
          {"b", o.files[1]},
          {"data_form", o.form},
          {"confidence", o.settings.confidence},
          {"power", o.settings.power},
          {"experiments", o.settings.experiments},
          {"seed", o.settings.seed},
          {"normal_approximation_runs", std::isfinite(o.normal_runs) ? json(o.normal_runs) : json(nullptr)},
          {"runs_to_decide", needed}};
}

SweepFigure decision_plan_figure(const DecisionPlanOutcome& o) {
  const std::string a = o.names[0], b = o.names[1];
  SweepFigure f;
  f.title = "telling " + a + " from " + b + ": " + o.form;
  f.x_label = "runs N";
  f.y_label = "probability of a correct decision";
  f.log_x = true;
  SweepPoints pa{"B rejected at " + percent(o.settings.confidence) + " when A is true", {}, {}, {}};
  SweepPoints pb{"A rejected at " + percent(o.settings.confidence) + " when B is true", {}, {}, {}};
  SweepCurve na{"normal approximation, A true", {}, {}}, nb{"normal approximation, B true", {}, {}};
  for (const auto& p : o.table) {
    const double m = p.experiments;
    pa.x.push_back(double(p.runs));
    pa.y.push_back(p.power_a);
    pa.spread.push_back(std::sqrt(p.power_a * (1 - p.power_a) / m));
    pb.x.push_back(double(p.runs));
    pb.y.push_back(p.power_b);
    pb.spread.push_back(std::sqrt(p.power_b * (1 - p.power_b) / m));
    na.x.push_back(double(p.runs));
    na.y.push_back(p.normal_power_a);
    nb.x.push_back(double(p.runs));
    nb.y.push_back(p.normal_power_b);
  }
  f.points = {pa, pb};
  f.curves = {na, nb};
  double lo = double(o.table.front().runs), hi = double(o.table.back().runs);
  for (const auto& p : o.table) lo = std::min(lo, double(p.runs)), hi = std::max(hi, double(p.runs));
  if (o.needed && o.needed->reached) {
    lo = std::min(lo, double(o.needed->runs));
    hi = std::max(hi, double(o.needed->runs));
    f.points.push_back({"needed: N = " + std::to_string(o.needed->runs), {double(o.needed->runs)},
                        {std::min(o.needed->at.power_a, o.needed->at.power_b)}, {}});
  }
  f.curves.push_back({"power asked " + short_number(o.settings.power, 3), {lo, hi}, {o.settings.power, o.settings.power}});
  return f;
}

void print_decision_plan(std::ostream& out, const DecisionPlanOutcome& o) {
  const std::string a = o.names[0], b = o.names[1];
  out << "\n  telling A = " << a << " from B = " << b << " (" << o.form << ")\n";
  print_row(out, "method", std::to_string(o.settings.experiments) +
                               " synthetic experiments from each model per N (seed " + std::to_string(o.settings.seed) +
                               "), likelihood-ratio test at " + percent(o.settings.confidence) + " confidence");
  char line[200];
  std::snprintf(line, sizeof line, "\n  %10s %14s %14s %12s %12s %12s\n", "N", "P(reject B|A)", "P(reject A|B)",
                "size B", "size A", "normal app.");
  out << line;
  for (const auto& p : o.table) {
    std::snprintf(line, sizeof line, "  %10lld %14s %14s %12s %12s %12s\n", static_cast<long long>(p.runs),
                  short_number(p.power_a, 3).c_str(), short_number(p.power_b, 3).c_str(),
                  short_number(p.size_b, 2).c_str(), short_number(p.size_a, 2).c_str(),
                  short_number(p.normal_power_a, 3).c_str());
    out << line;
  }
  out << '\n';
  const std::string goal = "both tests at power " + short_number(o.settings.power, 3);
  print_row(out, "normal app.", std::isfinite(o.normal_runs)
                                    ? "N = " + short_number(std::ceil(o.normal_runs), 6) + " for " + goal
                                    : std::string("the models give the same mean ratio: no N tells them apart"));
  if (o.needed)
    print_row(out, "runs needed",
              o.needed->reached
                  ? "N = " + std::to_string(o.needed->runs) + " for " + goal + " (synthetic: " +
                        short_number(o.needed->at.power_a, 3) + " and " + short_number(o.needed->at.power_b, 3) +
                        ", to 2 % in N)"
                  : "not reached up to N = " + std::to_string(o.needed->runs) + " (the bound on synthetic runs)");
}

}  // namespace trapwork
