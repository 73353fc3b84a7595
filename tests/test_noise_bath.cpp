// Noise during the protocol, issue 17 item 4 and the later keys (solver/noise.hpp): damping
// toward a thermal bath (Lindblad route), relative (RIN) noise, and the notes of the Lindblad
// route.
//
// The bath's model (BathRequest, noise.hpp) for a harmonic trap has the population rate
// equations of the damped oscillator's master equation (Breuer and Petruccione, The Theory of
// Open Quantum Systems (2002), section 3.4.6, from memory):
//   dp_n/dt = g (N + 1) [(n + 1) p_{n+1} - n p_n] + g N [n p_{n-1} - (n + 1) p_n],
// whose first moment is d<n>/dt = -g (<n> - N) (multiply by n and sum: the textbook result,
// from memory), and whose stationary state is the Gibbs state at the bath temperature,
// p_n = (1 - q) q^n with q = N / (N + 1) = exp(-beta_bath omega).
//
// Jarzynski after a full relaxation (derived here). When the bath has relaxed every initial
// level to its Gibbs state, P(m -> n) = p_bath(n) for every m, and the TPM average with the
// initial inverse temperature beta factorises:
//   <exp(-beta dE)> = sum_m p_m exp(beta E_m) * sum_n p_bath(n) exp(-beta E_n)
//                   = [M / Z_A] * Z(beta + beta_bath) / Z(beta_bath),
// since a Gibbs weight p_m = exp(-beta E_m) / Z_A gives each of the M kept initial levels the
// same 1 / Z_A. For a harmonic trap (E_n = (n + 1/2) omega) Z(b) = exp(-b omega/2) / (1 - exp(-b omega)).
// The first factor grows with the initial levels kept (without bound for all of them): with a
// bath the equality fails, and its residual is no convergent number; against Z_B / Z_A = 1 (a
// hold) the residual is the product above minus 1.
#include <catch2/catch.hpp>

#include <cmath>
#include <fstream>
#include <sstream>

#include "scratch_files.hpp"
#include "solver/noise.hpp"
#include "solver/scenario/noise_output.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/tasks.hpp"

using namespace trapwork;

namespace {

Potential harmonic_trap(double omega = 1.0) {
  return Potential({Term("trap", Shape::harmonic, {{"frequency", omega}, {"centre", 0.0}})});
}

// a held trap in the eigenbasis integrator (the Lindblad route's own basis; cheap for long holds)
WorkRequest hold_request(InitialState initial) {
  WorkRequest r;
  r.initial = initial;
  r.reverse_run = false;
  r.time_step_check = false;
  r.spectrum.convergence_check = false;
  r.spectrum.options.method = EigenMethod::dense;
  r.integrator = Integrator::eigenbasis;
  r.final_margin = 14;
  r.max_initial_levels = 8;
  r.threads = 2;
  return r;
}

NoiseRequest bath_only(double mean_phonons, double rate) {
  NoiseRequest n;
  BathRequest b;
  b.mean_phonons = mean_phonons;
  b.rate = rate;
  n.bath = b;
  return n;
}

// Z(b) of a harmonic trap of frequency 1, levels n + 1/2
double harmonic_partition(double b) { return std::exp(-b / 2) / (1 - std::exp(-b)); }

// the probability of the line whose work (energy change) is `work` (0 if none)
double line_at(const WorkDistribution& d, double work) {
  for (const auto& l : d.lines)
    if (std::abs(l.work - work) < 1e-6) return l.probability;
  return 0;
}

}  // namespace

TEST_CASE("bath: a held harmonic trap relaxes to the Gibbs state at the bath temperature, <n> at the rate",
          "[noise][bath][validation]") {
  const double nbath = 0.3, gamma = 0.05;  // N and the rate, per unit time (omega = 1)
  const int n0 = 4;
  SECTION("the mean energy relaxes at the stated rate: <n>(t) = N + (n0 - N) exp(-gamma t)") {
    // source: d<n>/dt = -gamma (<n> - N) of the damped oscillator (header; from memory)
    const double tau = 10;
    const Protocol hold(tau, {Schedule::constant("trap.centre", 0)});
    const NoisyWorkResult r = run_noisy_work(harmonic_trap(), hold, hold_request(InitialState::eigenstate(n0)),
                                             bath_only(nbath, gamma));
    const double expected = nbath + (n0 - nbath) * std::exp(-gamma * tau) - n0;  // <dE> / omega
    INFO("<dE> " << r.distribution.mean << ", direct " << r.direct_mean.value << ", expected " << expected
                 << "; basis " << r.basis_levels << ", evaluations " << r.ode_evaluations);
    CHECK(r.route_name == "lindblad");
    CHECK(r.bath);
    CHECK(r.route_reason.find("bath") != std::string::npos);
    // ODE tolerance 1e-10 per unit time and a basis of 36 levels (the weight beyond it is
    // below 1e-12 here): 1e-7 relative is far above both
    CHECK(r.distribution.mean == Approx(expected).epsilon(1e-7));
    CHECK(r.direct_mean.value == Approx(expected).epsilon(1e-7));
    CHECK(r.extra_energy.value == Approx(expected).epsilon(1e-7));  // the closed hold changes nothing
  }
  SECTION("a long hold ends in the Gibbs state at the bath temperature") {
    const double tau = 300;  // gamma tau = 15: the slowest mode (rate gamma) left at 3e-7
    const Protocol hold(tau, {Schedule::constant("trap.centre", 0)});
    const NoisyWorkResult r = run_noisy_work(harmonic_trap(), hold, hold_request(InitialState::eigenstate(n0)),
                                             bath_only(nbath, gamma));
    const double q = nbath / (1 + nbath);
    for (int n = 0; n < 12; ++n) {
      const double gibbs = (1 - q) * std::pow(q, n);
      INFO("level " << n << ": " << line_at(r.distribution, n - n0) << " against Gibbs " << gibbs);
      // the deviation decays as exp(-gamma tau) = 3e-7 times (n0 + 1) modes at most
      CHECK(std::abs(line_at(r.distribution, n - n0) - gibbs) < 1e-5);
    }
  }
}

TEST_CASE("bath: Jarzynski fails after a full relaxation into a colder bath, by the closed form",
          "[noise][bath][validation]") {
  // derivation in the header: <exp(-beta dE)> = [M / Z_A] Z(beta + beta_bath) / Z(beta_bath)
  const double n_initial = 1.0, n_bath = 0.1, gamma = 0.05, tau = 300;
  const double beta = std::log1p(1 / n_initial), beta_bath = std::log1p(1 / n_bath);
  const Protocol hold(tau, {Schedule::constant("trap.centre", 0)});
  const NoisyWorkResult r =
      run_noisy_work(harmonic_trap(), hold, hold_request(InitialState::phonons(n_initial)), bath_only(n_bath, gamma));
  REQUIRE(std::isfinite(r.jarzynski.value));
  CHECK(r.bath_beta == Approx(beta_bath).epsilon(1e-12));
  const WorkInput& in = r.noiseless.forward;
  double initial_factor = 0;  // sum_m p_m exp(beta E_m) = M / Z_A
  for (int m = 0; m < in.transitions.initial_levels(); ++m)
    initial_factor += in.initial_weights[std::size_t(m)] * std::exp(beta * in.initial_energies[m]);
  const int kept = in.transitions.initial_levels();
  // with M kept levels normalised to 1: Z_A = sum_{m < M} exp(-beta (m + 1/2))
  CHECK(initial_factor ==
        Approx(kept * (1 - std::exp(-beta)) / (std::exp(-beta / 2) * (1 - std::exp(-beta * kept)))).epsilon(1e-8));
  const double closed_form = initial_factor * harmonic_partition(beta + beta_bath) / harmonic_partition(beta_bath);
  INFO("kept " << kept << ", <exp(-beta dE)> " << r.jarzynski.value << ", closed form " << closed_form
               << ", Z_B/Z_A " << r.distribution.partition_ratio);
  CHECK(r.jarzynski.value == Approx(closed_form).epsilon(1e-5));
  CHECK(r.distribution.partition_ratio == Approx(1).epsilon(1e-10));
  // it fails, clearly: the residual is the closed form minus 1 (about 3 here)
  CHECK(r.jarzynski.value / r.distribution.partition_ratio - 1 > 1);
  // and the mean energy change is that of the two Gibbs states: N - n_initial (truncated initial state)
  double n_start = 0;
  for (int m = 0; m < kept; ++m) n_start += in.initial_weights[std::size_t(m)] * m;
  CHECK(r.distribution.mean == Approx(n_bath - n_start).epsilon(1e-6));
}

TEST_CASE("bath: invalid baths are refused", "[noise][bath]") {
  const Protocol hold(10, {Schedule::constant("trap.centre", 0)});
  const WorkRequest request = hold_request(InitialState::eigenstate(0));
  NoiseRequest n = bath_only(0.1, 0);
  CHECK_THROWS_AS(run_noisy_work(harmonic_trap(), hold, request, n), InputError);
  CHECK_THROWS_WITH(run_noisy_work(harmonic_trap(), hold, request, n), Catch::Contains("bath.rate"));
  n = bath_only(-1, 0.1);
  n.bath->temperature = -0.5;
  CHECK_THROWS_WITH(run_noisy_work(harmonic_trap(), hold, request, n), Catch::Contains("bath.temperature"));
  n = bath_only(0.1, 0.1);
  n.route = NoiseRoute::realisations;
  CHECK_THROWS_WITH(run_noisy_work(harmonic_trap(), hold, request, n),
                    Catch::Contains("noise.route") && Catch::Contains("Lindblad route only"));
  // a moving trap propagated in its co-moving frame: the bath's levels are the lab's
  WorkRequest moving = request;
  moving.integrator = Integrator::fourth_order;
  const Protocol shuttle(10, {Schedule::linear("trap.centre", 0, 1)});
  CHECK_THROWS_WITH(run_noisy_work(harmonic_trap(), shuttle, moving, bath_only(0.1, 0.1)),
                    Catch::Contains("work.frame = \"lab\""));
}

namespace {
const std::string bath_base = R"(title = "held ion with a bath"
[particle]
mass = "40 u"
[units]
energy = "h*kHz"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "20 us"
[[protocol.change]]
parameter = "trap.centre"
ramp = "constant"
to = "0 um"
[initial]
mean_phonons = 0.5
[work]
integrator = "eigenbasis"
max_initial_levels = 6
time_step_check = false
)";
Scenario with_bath(const std::string& extra) { return read_scenario_text(bath_base + extra, "bath_test.toml"); }
}  // namespace

TEST_CASE("[bath] keys; invalid baths refused naming file, line and key", "[noise][bath][scenario]") {
  const Scenario s = with_bath("[bath]\nmean_phonons = 0.05\nrate = \"2 /ms\"\n");
  REQUIRE(s.noise);
  REQUIRE(s.noise->request.bath);
  CHECK(s.noise->request.sources.empty());
  CHECK(s.noise->request.bath->mean_phonons == 0.05);
  CHECK(s.noise->request.bath->rate == Approx(2000 * s.units.time_s()).epsilon(1e-12));
  const Scenario t = with_bath("[bath]\ntemperature = \"50 uK\"\nrate = \"200 1/s\"\n");
  REQUIRE(t.noise);
  CHECK(t.noise->request.bath->rate == Approx(200 * t.units.time_s()).epsilon(1e-12));
  CHECK(t.noise->request.bath->temperature == Approx(si::boltzmann * 50e-6 / t.units.energy_J()).epsilon(1e-10));
  auto refused = [&](const std::string& extra, const std::string& words) {
    INFO(extra);
    CHECK_THROWS_WITH(with_bath(extra), Catch::Contains("bath_test.toml:") && Catch::Contains(words));
  };
  refused("[bath]\ntemperature = \"-1 uK\"\nrate = \"200 /s\"\n", "bath.temperature");
  refused("[bath]\nmean_phonons = -0.1\nrate = \"200 /s\"\n", "bath.mean_phonons");
  refused("[bath]\nmean_phonons = 0.1\nrate = \"0 /s\"\n", "bath.rate");
  refused("[bath]\nmean_phonons = 0.1\nrate = \"200 Hz\"\n", "bath.rate");
  refused("[bath]\nmean_phonons = 0.1\nrate = 200\n", "bath.rate");
  refused("[bath]\nmean_phonons = 0.1\n", "bath.rate");
  refused("[bath]\nmean_phonons = 0.1\ntemperature = \"1 uK\"\nrate = \"200 /s\"\n", "exactly one of");
  refused("[bath]\nmean_phonons = 0.1\nrate = \"200 /s\"\nrat = 1\n", "bath.rat");
  refused("[noise]\nroute = \"realisations\"\n[[noise.source]]\nparameter = \"trap.centre\"\n"
          "heating_rate = \"100 quanta/s\"\nat_frequency = \"1 MHz\"\n[bath]\nmean_phonons = 0.1\nrate = \"200 /s\"\n",
          "noise.route");
}

TEST_CASE("model_work (plan, compare) refuses a [bath]-only scenario naming [bath], not [noise]", "[noise][bath]") {
  const Scenario s = with_bath("[bath]\nmean_phonons = 0.05\nrate = \"2 /ms\"\n");
  CHECK_THROWS_WITH(model_work(s, {}, "plan"), Catch::Contains("no [bath] for `trapwork plan`") &&
                                                  !Catch::Contains("[noise]"));
}

TEST_CASE("the work task with a bath reports an energy change, not work, and a Jarzynski failure it expects",
          "[noise][bath][scenario]") {
  const Scenario s = with_bath("[noise]\nstandard_error = \"1 h*kHz\"\n[[noise.source]]\nparameter = \"trap.centre\"\n"
                               "heating_rate = \"1000 quanta/s\"\nat_frequency = \"1 MHz\"\n"
                               "[bath]\nmean_phonons = 0.05\nrate = \"20000 /s\"\n");
  const WorkOutcome o = work_task(s, std::nullopt);
  REQUIRE(o.noise);
  CHECK(o.noise->route_name == "lindblad");
  const auto summary = task_summary(o)["noise"];
  INFO(summary.dump(1));
  CHECK(summary["quantity"] == "energy change (work + heat), not work");
  CHECK(summary["bath"]["rate_per_s"].get<double>() == Approx(20000).epsilon(1e-9));
  CHECK(summary["jarzynski_note"].get<std::string>().find("expected to fail") != std::string::npos);
  // cooling from 0.5 toward 0.05 phonons: the average exceeds Z_B/Z_A = 1
  CHECK(summary["jarzynski_residual"].get<double>() > 0);
  std::ostringstream report;
  print_task_report(report, o);
  const std::string text = report.str();
  const std::size_t section = text.find("noise and damping toward a bath");
  REQUIRE(section != std::string::npos);
  const std::string noise_part = text.substr(section);
  INFO(noise_part);
  CHECK_THAT(noise_part, Catch::Contains("energy change (work + heat), not work") &&
                             Catch::Contains("expected to fail") && Catch::Contains("residual"));
  // the Jarzynski line of the bath run is no PASS or WARN of the equality
  const std::size_t j = noise_part.find("Jarzynski");
  REQUIRE(j != std::string::npos);
  const std::string jline = noise_part.substr(j, noise_part.find('\n', j) - j);
  CHECK(jline.find("PASS") == std::string::npos);
  CHECK(jline.find("WARN") == std::string::npos);
  // item 3: standard_error does not apply to the Lindblad route, and the report says so
  CHECK_THAT(noise_part, Catch::Contains("note") && Catch::Contains("noise.standard_error does not apply"));
  REQUIRE(summary["notes"].size() == 1);
}

TEST_CASE("standard_error under the Lindblad route: a note, not silence", "[noise]") {
  NoiseRequest n;
  n.sources.push_back({"trap.centre", NoiseSpectrum::white(1e-3)});
  n.route = NoiseRoute::lindblad;
  const Protocol hold(6, {Schedule::constant("trap.centre", 0)});
  NoisyWorkResult r = run_noisy_work(harmonic_trap(), hold, hold_request(InitialState::eigenstate(0)), n);
  CHECK(r.notes.empty());
  n.mean_error_target = 0.01;
  r = run_noisy_work(harmonic_trap(), hold, hold_request(InitialState::eigenstate(0)), n);
  REQUIRE(r.notes.size() == 1);
  CHECK_THAT(r.notes[0], Catch::Contains("noise.standard_error does not apply to the Lindblad route"));
}

TEST_CASE("relative noise (RIN) equals the absolute PSD S_rel p^2 at a constant value, and follows p(t) when ramped",
          "[noise]") {
  // spring-constant noise on a trap of frequency 1.3: relative level s against absolute s 1.3^2
  const double p = 1.3, s = 2e-4, tau = 3;
  const Potential trap = harmonic_trap(p);
  const Protocol hold(tau, {Schedule::constant("trap.frequency", p)});
  WorkRequest request = hold_request(InitialState::phonons(0.5));
  request.integrator = Integrator::fourth_order;
  request.max_initial_levels = 3;
  request.final_margin = 8;
  for (const NoiseRoute route : {NoiseRoute::lindblad, NoiseRoute::realisations}) DYNAMIC_SECTION("route " << int(route)) {
    NoiseRequest relative, absolute;
    relative.sources.push_back({"trap.frequency", NoiseSpectrum::white(s), true});
    absolute.sources.push_back({"trap.frequency", NoiseSpectrum::white(s * p * p)});
    relative.route = absolute.route = route;
    relative.realisations = absolute.realisations = 3;
    const NoisyWorkResult a = run_noisy_work(trap, hold, request, relative);
    const NoisyWorkResult b = run_noisy_work(trap, hold, request, absolute);
    INFO("route " << a.route_name << ": extra energy " << a.extra_energy.value << " against " << b.extra_energy.value);
    REQUIRE(a.distribution.lines.size() == b.distribution.lines.size());
    CHECK(a.extra_energy.value > 0);
    // the same noise up to the rounding of sqrt(s) p against sqrt(s p^2)
    CHECK(a.extra_energy.value == Approx(b.extra_energy.value).epsilon(1e-10));
    for (std::size_t l = 0; l < a.distribution.lines.size(); ++l)
      CHECK(a.distribution.lines[l].probability == Approx(b.distribution.lines[l].probability).margin(1e-12));
  }
}

TEST_CASE("relative noise follows the parameter's value p(t) when it is ramped", "[noise][heavy]") {
  // measured ~35 s of CPU in Release (the three master equations of a frequency ramp)
  const double p = 1.3, s = 2e-4, tau = 3;
  const Potential trap = harmonic_trap(p);
  WorkRequest request = hold_request(InitialState::phonons(0.5));
  request.integrator = Integrator::fourth_order;
  request.max_initial_levels = 3;
  request.final_margin = 8;
  // ramped 1.3 -> 1.56: the relative noise is s p(t)^2, between the absolute levels at the ends
  // (the heating is linear in the noise level at each time, to first order in s)
  const Protocol ramp(tau, {Schedule::linear("trap.frequency", p, 1.2 * p)});
  const WorkResult noiseless = run_work(trap, ramp, request);
  auto extra = [&](double level, bool rel) {
    NoiseRequest n;
    n.sources.push_back({"trap.frequency", NoiseSpectrum::white(level), rel});
    n.route = NoiseRoute::lindblad;
    return run_noisy_work(trap, ramp, request, n, &noiseless).extra_energy.value;
  };
  const double low = extra(s * p * p, false), mid = extra(s, true), high = extra(s * 1.44 * p * p, false);
  INFO("absolute at p(0): " << low << ", relative: " << mid << ", absolute at p(tau): " << high);
  CHECK(low < mid);
  CHECK(mid < high);
}

TEST_CASE("[noise.source] relative = true: a RIN table equals the absolute depth PSD table of the tweezer example",
          "[noise][scenario]") {
  // examples/tweezer_intensity_noise.csv is the depth PSD RIN x depth^2 (depth 20 kB*uK): the
  // same table divided by 400 (kB*uK)^2, read as a RIN, must give the same internal spectrum
  const auto dir = trapwork_test::scratch_dir("noise", "relative");
  const std::string example = trapwork_test::read_all(std::filesystem::path(TRAPWORK_SOURCE_DIR) / "examples" /
                                                      "tweezer_intensity_noise.toml");
  std::filesystem::copy_file(std::filesystem::path(TRAPWORK_SOURCE_DIR) / "examples" / "tweezer_intensity_noise.csv",
                             dir / "tweezer_intensity_noise.csv");
  {
    std::ifstream in(dir / "tweezer_intensity_noise.csv");
    std::ofstream out(dir / "rin.csv");
    std::string line;
    std::getline(in, line);
    out << line << "\n";
    while (std::getline(in, line)) {
      if (line.empty() || line[0] == '#') continue;
      std::istringstream row(line);
      double f, psd;
      char comma;
      REQUIRE(row >> f >> comma >> psd);
      out << f << ", " << psd / 400 << "\n";
    }
  }
  std::string relative = example;
  const std::string unit = "psd_unit = \"kB^2*uK^2/Hz\"";
  REQUIRE(relative.find(unit) != std::string::npos);
  relative.replace(relative.find(unit), unit.size(), "psd_unit = \"1/Hz\"\nrelative = true");
  relative.replace(relative.find("\"tweezer_intensity_noise.csv\""), 29, "\"rin.csv\"");
  const Scenario a = read_scenario_text(example, (dir / "absolute.toml").string());
  const Scenario b = read_scenario_text(relative, (dir / "relative.toml").string());
  REQUIRE(a.noise);
  REQUIRE(b.noise);
  const NoiseSource& sa = a.noise->request.sources[0];
  const NoiseSource& sb = b.noise->request.sources[0];
  CHECK_FALSE(sa.relative);
  CHECK(sb.relative);
  const double depth = a.potential.parameter("tweezer.depth");
  REQUIRE(sa.spectrum.frequencies().size() == sb.spectrum.frequencies().size());
  for (std::size_t i = 0; i < sa.spectrum.frequencies().size(); ++i) {
    CHECK(sb.spectrum.frequencies()[i] == Approx(sa.spectrum.frequencies()[i]).epsilon(1e-12));
    CHECK(sb.spectrum.densities()[i] * depth * depth == Approx(sa.spectrum.densities()[i]).epsilon(1e-9));
  }
  CHECK(b.noise->given[0].find("relative") != std::string::npos);
  // refused: a relative PSD with a parameter's unit, and relative with a heating rate
  std::string wrong = relative;
  wrong.replace(wrong.find("psd_unit = \"1/Hz\""), 17, "psd_unit = \"kB^2*uK^2/Hz\"");
  CHECK_THROWS_WITH(read_scenario_text(wrong, (dir / "wrong.toml").string()),
                    Catch::Contains("noise.source[1].psd_unit") && Catch::Contains("1/Hz"));
}

TEST_CASE("bath during a slow frequency ramp: the state follows the instantaneous Gibbs state", "[noise][bath]") {
  // The rates act between the instantaneous levels of H(t) (BathRequest): a bath much faster
  // than the ramp (gamma = 1 against a 20 % change over tau = 20) keeps the state near the Gibbs
  // state of H(t) at the bath temperature (detailed balance, header), so the run ends near that
  // of H_B: q = exp(-beta_bath omega_B). The lag ~ (d omega/dt) / gamma = 0.01 shifts it by ~3e-3
  // (measured: 0.6957 against 0.6988 for level 0). Rates between H_A's levels instead would end
  // near H_A's Gibbs state, p_0 = 1 - exp(-1) = 0.632: the check tells them apart.
  const double tau = 20, temperature = 1.0;
  const Protocol ramp(tau, {Schedule::linear("trap.frequency", 1.0, 1.2)});
  WorkRequest request = hold_request(InitialState::eigenstate(0));
  request.integrator = Integrator::fourth_order;
  request.max_initial_levels = 1;
  request.final_margin = 12;
  NoiseRequest n;
  BathRequest b;
  b.temperature = temperature;
  b.rate = 1.0;
  n.bath = b;
  const NoisyWorkResult r = run_noisy_work(harmonic_trap(), ramp, request, n);
  const double q = std::exp(-1.2 / temperature);
  const WorkInput& in = r.noiseless.forward;
  for (int k = 0; k < 6; ++k) {
    const double gibbs = (1 - q) * std::pow(q, k);
    const double p = r.transitions.probability(0, k);
    INFO("level " << k << ": " << p << " against Gibbs " << gibbs << " (E_B " << in.final_energies[k] << ")");
    CHECK(std::abs(p - gibbs) < 5e-3);
  }
}
