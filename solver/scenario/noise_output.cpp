#include "solver/scenario/noise_output.hpp"

#include <cmath>
#include <string>

namespace trapwork {

namespace {

// "0.0123 +- 0.0004 h*kHz" (the value and its standard error in one unit)
// The Lindblad route's estimates have no statistical error (error 0): it is not printed as
// "+- 0", which would read as an exact result; its numerical error is the line error row.
std::string with_error(const Estimate& e, double per_unit, const std::string& unit) {
  const std::string u = unit.empty() ? std::string() : " " + unit;
  if (e.error == 0) return short_number(e.value / per_unit, 8) + u + " (master equation: no statistical error)";
  return short_number(e.value / per_unit, 5) + " +- " + short_number(e.error / per_unit, 2) + u;
}

// quanta per second from quanta per internal time
double per_second(const Scenario& s, double per_internal_time) { return per_internal_time / s.units.time_s(); }

// With a bath the TPM lines are energy changes, and the Jarzynski average is no test of the equality.
const char* energy_change_words = "energy change (work + heat), not work";

// "<exp(-beta dE)> = 0.52 against Z_B/Z_A = 1: residual -0.48, expected to fail with a bath ..."
std::string bath_jarzynski(const NoisyWorkResult& r) {
  const double ratio = r.distribution.partition_ratio;
  return "<exp(-beta dE)> = " + short_number(r.jarzynski.value, 8) + " against Z_B/Z_A = " + short_number(ratio, 8) +
         ": residual <exp(-beta dE)> / (Z_B/Z_A) - 1 = " + short_number(r.jarzynski.value / ratio - 1, 4) +
         ", expected to fail: the bath exchanges heat, so this is not a test of the equality";
}

}  // namespace

CsvTable noise_lines_table(const Scenario& s, const NoisyWorkResult& r) {
  const Display d = display(s);
  const WorkDistribution& clean = r.noiseless.distribution;
  CsvTable t;
  t.columns = {{"work" + d.e_col, {}}, {"probability_noisy", {}}, {"probability_noisy_error", {}},
               {"probability_noiseless", {}}, {"initial", {}}, {"final", {}}};
  for (std::size_t l = 0; l < r.distribution.lines.size(); ++l) {
    const WorkLine& line = r.distribution.lines[l];
    t.columns[0].values.push_back(d.energy(line.work));
    t.columns[1].values.push_back(line.probability);
    t.columns[2].values.push_back(r.line_error[l]);
    // the same line structure (it depends on the energies only)
    t.columns[3].values.push_back(l < clean.lines.size() ? clean.lines[l].probability : std::nan(""));
    t.columns[4].values.push_back(line.initial);
    t.columns[5].values.push_back(line.final);
  }
  t.comments = {
      "trapwork work: work lines with noise during the protocol (" + r.route + ", seed " + std::to_string(r.seed) + ")",
      r.bath ? std::string("with a bath: probability_noisy is the distribution of the ") + energy_change_words +
                   "; probability_noiseless that of the work"
             : std::string("probability_noisy and probability_noiseless: distributions of the work"),
      r.route_name == "lindblad"
          ? "probability_noisy: from the Lindblad equation (the exact white-noise average); probability_noisy_error: "
            "0, no statistical error (the accuracy is the ODE tolerance and the basis)"
          : "probability_noisy: averaged over the realisations; probability_noisy_error: its standard error (jackknife)",
      "PSD convention: " + r.psd_convention,
  };
  return t;
}

nlohmann::ordered_json noise_summary(const Scenario& s, const NoisyWorkResult& r) {
  const Display d = display(s);
  nlohmann::ordered_json j;
  j["route"] = r.route_name;
  j["route_method"] = r.route;
  j["route_reason"] = r.route_reason;
  j["psd_convention"] = r.psd_convention;
  j["realisations"] = r.realisations;
  if (!r.realisation_choice.empty()) j["realisations_chosen"] = r.realisation_choice;
  j["seed"] = r.seed;
  j["time_steps"] = r.steps;
  if (s.noise) j["sources"] = s.noise->given;
  if (r.bath) {
    nlohmann::ordered_json b;
    if (s.noise) b["given"] = s.noise->bath_given;
    b["rate_per_s"] = per_second(s, r.bath_rate);
    b["inverse_temperature_per_" + d.e_col.substr(1)] =
        std::isfinite(r.bath_beta) ? nlohmann::ordered_json(r.bath_beta * d.energy_per) : nlohmann::ordered_json(nullptr);
    b["model"] = "jumps between instantaneous levels n -> k at rate |<k|x|n>|^2/|<0|x|1>|^2 (N+1) down, N up, "
                 "N = 1/(exp((E_n - E_k)/kT) - 1)";
    j["bath"] = b;
    j["quantity"] = energy_change_words;
  } else {
    j["quantity"] = "work";
  }
  auto estimate = [&](const Estimate& e, double per) {
    nlohmann::ordered_json o;
    o["value"] = std::isfinite(e.value) ? nlohmann::ordered_json(e.value / per) : nlohmann::ordered_json(nullptr);
    o["standard_error"] = std::isfinite(e.error) ? nlohmann::ordered_json(e.error / per) : nlohmann::ordered_json(nullptr);
    return o;
  };
  const std::string ec = d.e_col;
  j["mean_work" + ec] = estimate(r.mean, d.energy_per);
  j["mean_work_noiseless" + ec] = r.noiseless.distribution.mean / d.energy_per;
  j["work_variance" + ec + "2"] = estimate(r.variance, d.energy_per * d.energy_per);
  j["work_variance_noiseless" + ec + "2"] = r.noiseless.distribution.variance / (d.energy_per * d.energy_per);
  j["jarzynski_average"] = estimate(r.jarzynski, 1);
  if (r.bath && std::isfinite(r.jarzynski.value)) {
    j["jarzynski_residual"] = r.jarzynski.value / r.distribution.partition_ratio - 1;
    j["jarzynski_note"] = "expected to fail with a bath (heat exchanged): not a test of the equality";
  }
  j["partition_ratio"] = std::isfinite(r.distribution.partition_ratio) ? nlohmann::ordered_json(r.distribution.partition_ratio)
                                                                         : nlohmann::ordered_json(nullptr);
  j["extra_energy" + ec] = estimate(r.extra_energy, d.energy_per);
  if (r.harmonic_omega > 0)
    j["heating_rate_quanta_per_s"] = estimate({per_second(s, r.heating_quanta_rate.value),
                                               per_second(s, r.heating_quanta_rate.error)}, 1);
  // the statistical error of P(W) (realisations) or the Lindblad check's line distance, in the
  // total-variation form of --tolerance, with what was asked for
  j["line_error"] = std::isfinite(r.line_error_total) ? nlohmann::ordered_json(r.line_error_total)
                                                      : nlohmann::ordered_json(nullptr);
  if (r.mean_error_target > 0) j["standard_error_requested" + ec] = r.mean_error_target / d.energy_per;
  if (r.line_error_target > 0) j["line_error_requested"] = r.line_error_target;
  if (r.mean_error_target > 0 || r.line_error_target > 0) j["requested_error_met"] = r.targets_met;
  j["unresolved_weight"] = r.distribution.unresolved_weight;
  // realisations: the noisy states' largest weighted share in the grid's outer 2% of momenta or
  // points (null on the Lindblad route); above 1e-8 the grid, not the noise, limits the heating
  j["noisy_edge"] = std::isfinite(r.noisy_edge) ? nlohmann::ordered_json(r.noisy_edge) : nlohmann::ordered_json(nullptr);
  j["warnings"] = r.warnings;
  j["notes"] = r.notes;
  return j;
}

void print_noise_report(std::ostream& out, const Scenario& s, const NoisyWorkResult& r) {
  const Display d = display(s);
  auto row = [&](const std::string& label, const std::string& text) { print_row(out, label, text); };
  out << (r.bath ? "\nnoise and damping toward a bath during the protocol\n" : "\nnoise during the protocol\n");
  if (s.noise)
    for (std::size_t k = 0; k < s.noise->given.size(); ++k) row(k == 0 ? "sources" : "", s.noise->given[k]);
  if (r.bath) {
    row("bath", (s.noise ? s.noise->bath_given + "; " : std::string()) +
                    "jumps between instantaneous levels with detailed balance");
    row("quantity", std::string(energy_change_words) +
                        ": with a bath the TPM lines below and in noise_lines.csv are energy changes E_n^B - E_m^A");
  }
  row("route", r.route_name == "lindblad" ? r.route : r.route + ", seed " + std::to_string(r.seed));
  row("why", r.route_reason);
  if (r.route_name == "realisations" || r.line_error_target > 0)
    row(r.route_name == "lindblad" ? "check" : "R", r.route_name == "lindblad" ? r.realisation_choice
                                                    : std::to_string(r.realisations) + " realisations, " + r.realisation_choice);
  if (r.mean_error_target > 0 && r.route_name == "realisations")
    row("asked", "standard error of <W> <= " + short_number(r.mean_error_target / d.energy_per, 3) + " " + d.e +
                     " (noise.standard_error)");
  if (r.route_name == "realisations" || r.line_error_target > 0)
    row("line error", (std::isfinite(r.line_error_total) ? short_number(r.line_error_total, 3) : std::string("not computed")) +
                          (r.route_name == "lindblad" ? " (distance to the finer master equation)"
                                                      : " (half the sum of the line standard errors)") +
                          (r.line_error_target > 0 ? ", tolerance " + short_number(r.line_error_target, 3) : ""));
  if (!s.noise || !s.noise->request.sources.empty()) row("PSD", r.psd_convention);
  row(r.bath ? "<dE>" : "<W>", with_error(r.mean, d.energy_per, d.e) + " (noiseless " +
                 short_number(r.noiseless.distribution.mean / d.energy_per, 5) + " " + d.e + ")");
  row(r.bath ? "var dE" : "var W", with_error(r.variance, d.energy_per * d.energy_per, "(" + d.e + ")^2") + " (noiseless " +
                   short_number(r.noiseless.distribution.variance / (d.energy_per * d.energy_per), 5) + ")");
  row("extra E", with_error(r.extra_energy, d.energy_per, d.e) +
                     (r.bath ? " from the noise and the bath (direct <H_B>, all levels; negative: net cooling)"
                             : " from the noise (direct <H_B>, all levels)"));
  if (r.harmonic_omega > 0)
    row(r.bath ? "net heating" : "heating",
        with_error({per_second(s, r.heating_quanta_rate.value), per_second(s, r.heating_quanta_rate.error)}, 1,
                   "quanta/s") +
            " over the protocol, in quanta of the initial harmonic frequency");
  if (r.bath && std::isfinite(r.jarzynski.value))
    row("Jarzynski", bath_jarzynski(r));
  else if (std::isfinite(r.jarzynski.value))
    row("Jarzynski", "<exp(-beta W)> = " + with_error(r.jarzynski, 1, "") + " against Z_B/Z_A = " +
                         short_number(r.distribution.partition_ratio, 8) +
                         (r.route_name == "lindblad"
                              ? " (Hermitian jump operators: a unital map, it holds up to truncation)"
                              : " (each trace is unitary: it holds per trace up to truncation)"));
  row("lines", r.bath ? "noise_lines.csv: P(dE) with noise and bath, P(W) without, each noisy line with its standard error"
                      : "noise_lines.csv: P(W) with and without noise, each noisy line with its standard error");
  for (const auto& n : r.notes) row("note", n);
  for (const auto& w : r.warnings) row("WARN", w);
}

WorkFigure noisy_work_figure(const WorkRun& run, const NoisyWorkResult& r) {
  WorkFigure f = work_figure(run);
  f.title = (r.bath ? "work without, energy change with noise and bath" : "work distribution without and with noise") +
            std::string(r.route_name == "lindblad" ? " (Lindblad)" : " (" + std::to_string(r.realisations) + " realisations)");
  f.result.label = "without noise";
  f.noisy = work_series(run, r.bath ? "with noise and bath: energy change (work + heat)" : "with noise", r.distribution);
  if (r.route_name == "realisations") f.noisy->error = r.line_error;  // probabilities: no unit
  const Display d = display(run.scenario);
  f.notes.push_back(std::string(r.bath ? "the <W> marker is without noise; with noise and bath <dE> = "
                                        : "the <W> marker is without noise; with noise <W> = ") +
                    (r.route_name == "lindblad"
                         ? short_number(r.mean.value / d.energy_per, 5) + " " + d.e + " (Lindblad: no statistical error)"
                         : with_error(r.mean, d.energy_per, d.e) + " (standard error)"));
  return f;
}

}  // namespace trapwork
