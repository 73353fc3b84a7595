#pragma once
// The trap's calibration uncertainty carried into `trapwork work` (--uncertainty FILE): the
// covariance of the fitted coefficients that `trapwork fit` writes (fit_summary.json: each
// coefficient's name, unit, value and uncertainty, and their correlation matrix), read here and
// propagated by solver/uncertainty.hpp through whole work runs (compute_work, the run_work path
// of every `work`): <W>, sd(W), Delta F and the strong lines' probabilities, each with the
// standard deviation the calibration gives it.
//
// Each perturbed run uses the nominal run's grid, time steps and levels (so that the differences
// are the parameters' and not a new automatic choice's) and leaves out the checks (reverse run,
// half-step and finer-grid runs, traces), which the nominal run already made.
#include <Eigen/Dense>
#include <cstdint>
#include <limits>
#include <nlohmann/json.hpp>
#include <optional>
#include <ostream>
#include <string>
#include <vector>

#include "solver/scenario/data_files.hpp"
#include "solver/scenario/model_choice_task.hpp"
#include "solver/scenario/output.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/uncertainty.hpp"
#include "solver/work.hpp"

namespace trapwork {

struct TaskHooks;
struct ScenarioWork;
struct WorkOutcome;

// The fitted coefficients as parameters of a scenario's potential, in internal units.
struct Calibration {
  std::string file;                    // the fit_summary.json read
  std::vector<std::string> addresses;  // "trap.frequency", in the file's order
  std::vector<std::string> units;      // the file's lab units ("MHz", "h*Hz/nm^4")
  std::vector<double> lab_sd;          // the file's uncertainties, lab units
  std::vector<double> per_unit;        // internal value of one lab unit, per parameter
  Eigen::VectorXd mean;                // the scenario's values (the centre of the spread), internal
  Eigen::VectorXd fitted;              // the file's values, internal (the scenario's for [uncertainty])
  Eigen::MatrixXd covariance;          // internal units
  Eigen::MatrixXd correlation;
  std::vector<std::string> notes;      // e.g. the scenario's value differs from the fit's
};

// Reads `path` (a fit_summary.json of `trapwork fit`, or the folder holding one) for `scenario`:
// each coefficient name is a parameter of one term of its potential (the term holding all of
// them; a name with a dot is a full address). InputError naming the file, the line and the key
// for a missing or unreadable file, a coefficient the scenario does not have, a parameter that
// the protocol changes, an uncertainty that is not > 0, a correlation matrix of the wrong size,
// not symmetric, with |r| > 1 or a diagonal other than 1, or not positive semi-definite.
// `term`: the term whose parameters bare coefficient names are (empty: the one term holding all).
Calibration read_calibration(const std::string& path, const Scenario& scenario, const std::string& term = {});

// The scenario's [uncertainty] (checked when it was read) as a calibration about the scenario's
// current values (a sweep point's, for a swept parameter); `file` is "<scenario> [uncertainty]".
Calibration scenario_calibration(const Scenario& scenario);

struct UncertaintySettings;
// Whether a run carries a calibration forward: --uncertainty FILE, or the scenario's
// [uncertainty] (unless --uncertainty none).
bool has_calibration(const Scenario& scenario, const UncertaintySettings& settings);
// That calibration: read_calibration of the file, or scenario_calibration. InputError when both
// are given (two statements of one trap's calibration: the user says which, by removing one or
// by --uncertainty none, which leaves the table out).
Calibration calibration_of(const Scenario& scenario, const UncertaintySettings& settings);

struct UncertaintySettings {
  // fit_summary.json or its folder; empty: the scenario's [uncertainty] if it has one, else no
  // propagation; "none": no propagation even with [uncertainty]
  std::string calibration;
  std::string method = "auto";  // auto | linear | sampling | both
  int samples = 100;            // parameter sets drawn for sampling
  std::uint64_t seed = 1;
  double step_in_sd = 1;        // finite-difference step along each principal axis
  // auto: check the linear result against sampling when its runs' estimated arithmetic (each
  // run's propagation as --tolerance counts it, and its two spectra as spectrum_cost estimates
  // them) is at most this. Counted, not timed, so that the choice does not depend on the
  // machine's load (the command line and the Python module write the same files). About 20 s
  // on the 2-core test machine, which did 2.3 to 2.9e10 such operations per second.
  double check_operations = 5e11;
};

// One result with its spread.
struct SpreadResult {
  std::string name;     // "<W>", "sd(W)", "Delta F", "P(0->1)"
  bool energy = false;  // in the display energy unit (else a probability)
  double value = 0;     // the nominal run's (internal units)
  double sd = std::numeric_limits<double>::quiet_NaN();  // of the method used; NaN: not computed
  double floor = 0;     // spreads at or below this are rounding noise of the runs (said so)
};

struct WorkUncertainty {
  UncertaintySettings settings;
  Calibration calibration;
  std::vector<SpreadResult> results;  // <W>, sd(W), Delta F, then the strong lines by work
  std::vector<WorkLine> lines;        // the strong lines (P >= strong_line_probability)
  std::optional<LinearSpread> linear;
  std::optional<SampledSpread> sampled;
  std::optional<SpreadAgreement> agreement;  // when both ran
  std::string method;                 // "linear" or "sampling": whose sd is reported
  std::string reason;                 // why, in words
  std::vector<std::string> warnings;
  int runs = 0;                       // perturbed work runs made
  double seconds = 0;                 // their wall time
  // auto with an accurate linear result: the estimated arithmetic of the check against
  // sampling (samples x one perturbed run), compared with settings.check_operations; else NaN
  double check_estimate = std::numeric_limits<double>::quiet_NaN();
};
inline constexpr double strong_line_probability = 1e-3;
inline constexpr int strong_lines_at_most = 40;

// InputError for settings out of range (method, samples, step), before any run.
void check_uncertainty_settings(const UncertaintySettings& settings);

// Propagates the calibration through work runs about `nominal` (the scenario's run). InputError
// for settings out of range, a run with moving walls or [noise] (not supported: said so);
// the hooks' progress runs over the perturbed runs and may throw Interrupted.
WorkUncertainty work_uncertainty(const Scenario& scenario, const ScenarioWork& nominal,
                                 const UncertaintySettings& settings, const TaskHooks& hooks);

// work_uncertainty of the outcome's run (the chosen one with --tolerance) into o.uncertainty;
// nothing when settings.calibration is empty.
void add_work_uncertainty(WorkOutcome& o, const UncertaintySettings& settings, const TaskHooks& hooks);

// lines_uncertainty.csv, the summary's "calibration_uncertainty" part, work.png's error bars
// (set on the figure's result series, one per line: the standard deviation, NaN where not
// computed, which draws none), and the report's section.
CsvTable uncertainty_lines_table(const Scenario& scenario, const WorkUncertainty& u);
nlohmann::ordered_json uncertainty_summary(const Scenario& scenario, const WorkUncertainty& u);
void add_uncertainty_bars(WorkFigure& figure, const Scenario& scenario, const WorkDistribution& distribution,
                          const WorkUncertainty& u);
void print_uncertainty_report(std::ostream& out, const Scenario& scenario, const WorkUncertainty& u);

// ---- compare: the model's own uncertainty folded into its likelihood ----------------------
// A marginal likelihood over the calibration: L_marg = (1/K) sum_k L(data | model at the k-th
// parameter set drawn from the calibration), K draws (seeded), each model run through
// model_work (the automatic path of compare) and its ln L from choose_between's likelihoods
// (the same data form and resolution as compare --against). A model whose potential lacks the
// calibration's parameters, or whose values differ from the calibration's by more than 0.1 sd
// (another hypothesis, e.g. the harmonic model with its quartic term 0), keeps its nominal ln L
// (said so). Posterior probabilities from the
// marginal likelihoods and the prior weights (equal when none are given). The calibrated
// likelihood-ratio test's p-values stay those of the nominal models.
struct CalibratedLikelihood {
  std::string file;
  int samples = 0;
  std::uint64_t seed = 0;
  std::vector<std::string> names;            // models, the compared scenario first
  std::vector<double> nominal, marginal;     // ln L (densities per display unit for work values)
  std::vector<double> spread;                // sd of ln L over the draws (NaN: not folded)
  std::vector<double> posterior;             // from the marginal likelihoods
  std::vector<std::string> not_folded;       // per model: why not ("" when folded)
  std::vector<std::string> notes;            // the compared scenario's values against the calibration's
};
CalibratedLikelihood calibrated_likelihood(const WorkRun& main_run, const WorkData& data, double sigma,
                                           const ModelChoiceSettings& models, const UncertaintySettings& settings,
                                           const TaskHooks& hooks);
nlohmann::ordered_json calibrated_likelihood_json(const CalibratedLikelihood& c);
void print_calibrated_likelihood(std::ostream& out, const CalibratedLikelihood& c);

}  // namespace trapwork
