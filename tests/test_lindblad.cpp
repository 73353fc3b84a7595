// Noise during the protocol, Lindblad route (solver/noise.hpp): the white-noise master
// equation in the eigenbasis, against published heating, the Jarzynski equality of a unital
// map, and the realisations route.
#include <catch2/catch.hpp>

#include <cmath>

#include "solver/noise.hpp"

using namespace trapwork;

namespace {

Potential harmonic_trap() { return Potential({Term("trap", Shape::harmonic, {{"frequency", 1.0}, {"centre", 0.0}})}); }
Potential quartic_trap() {
  return Potential({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 0.01}})});
}

// as tests/test_noise.cpp: a small dense-solver run without the checks noise does not use
WorkRequest quick_request(InitialState initial = InitialState::eigenstate(0)) {
  WorkRequest r;
  r.initial = initial;
  r.reverse_run = false;
  r.time_step_check = false;
  r.spectrum.convergence_check = false;
  r.spectrum.options.method = EigenMethod::dense;
  r.final_margin = 14;
  r.max_initial_levels = 8;
  r.threads = 2;
  return r;
}

NoiseRequest white_noise(const std::string& address, double level, NoiseRoute route, int realisations = 2) {
  NoiseRequest n;
  n.sources.push_back({address, NoiseSpectrum::white(level)});
  n.realisations = realisations;
  n.seed = 7;
  n.route = route;
  return n;
}

}  // namespace

TEST_CASE("Lindblad: white position noise heats a harmonic trap at w^3 S_x / 4 quanta per unit time",
          "[noise][lindblad][validation]") {
  // Source: Savard, O'Hara and Thomas, PRA 56, R1095 (1997), d<E>/dt = (pi/2) m w^4 S_x(w) per
  // angular frequency, i.e. w^4 S_x / 4 per ordinary frequency (from memory; derived in
  // tests/test_noise.cpp, whose realisations test this repeats with the same setup).
  const double quanta_rate = 0.025, tau = 6 * 3.14159265358979323846;  // 3 periods (see below)
  const double s_x = position_psd_from_heating_rate(quanta_rate, 1.0);
  const Protocol hold(tau, {Schedule::constant("trap.centre", 0)});
  const NoisyWorkResult r =
      run_noisy_work(harmonic_trap(), hold, quick_request(), white_noise("trap.centre", s_x, NoiseRoute::lindblad));
  const double published = s_x * tau / 4;
  INFO("extra energy " << r.extra_energy.value << ", published " << published << "; quanta rate "
                       << r.heating_quanta_rate.value << ", basis " << r.basis_levels << " levels, "
                       << r.ode_evaluations << " evaluations");
  CHECK(r.route_name == "lindblad");
  CHECK(r.route_reason.find("asked for") != std::string::npos);
  // The master equation is exact for white noise: what is left is the ODE tolerance (1e-10
  // per unit time on the density matrix elements) and the basis truncation (the heated state,
  // n = 0.5 mean, has weight ~(1/3)^K beyond K = 44 levels): 1e-6 relative is far above both.
  CHECK(r.extra_energy.value == Approx(published).epsilon(1e-6));
  CHECK(r.heating_quanta_rate.value == Approx(quanta_rate).epsilon(1e-6));
  // White centre noise from the ground state averages coherent states |beta> over a Gaussian
  // beta ~ int eps(t) e^{i w t} dt, circular (<beta^2> ~ int e^{2 i w t} dt = 0) when tau is
  // a whole number of half periods: then a thermal state of mean occupation nbar = rate tau
  // (Glauber-Sudarshan P function of a thermal state, common practice), so
  // P(0 -> n) = nbar^n / (1 + nbar)^(n+1). (At tau = 20 the lines differ by ~1e-4: measured.)
  const double nbar = quanta_rate * tau;
  REQUIRE(r.distribution.lines.size() >= 10);
  for (int n = 0; n < 10; ++n) {
    const double thermal = std::pow(nbar, n) / std::pow(1 + nbar, n + 1);
    INFO("line " << n << ": " << r.distribution.lines[std::size_t(n)].probability << " against " << thermal);
    CHECK(r.distribution.lines[std::size_t(n)].work == Approx(n).margin(1e-8));
    CHECK(std::abs(r.distribution.lines[std::size_t(n)].probability - thermal) < 1e-7);
  }
  // deterministic: no statistical error
  CHECK(r.mean.error == 0);
  CHECK(r.realisations == 0);
}

TEST_CASE("Lindblad: the Jarzynski equality holds for the unital map up to the levels left out",
          "[noise][lindblad][validation][heavy]") {
  // Hermitian jump operators give a unital map (Lambda(1) = 1), for which <exp(-beta W)> =
  // Z_B / Z_A holds in the TPM scheme: Rastegin, J. Stat. Mech. (2013) P06016; Albash, Lidar,
  // Marvian and Zanardi, PRE 88, 032146 (2013) (both from memory). With K initial levels kept
  // (left-out thermal weight eps_K) the average is, by unitality (sum over all m of
  // P(m -> n) = 1), (Z_B / Z_A) (1 - p_R(>=K)) / (1 - eps_K), where p_R(>=K) = sum_n p^B_n
  // sum_{m >= K} P(m -> n). For white (stationary, time-reversal invariant) noise and a real
  // Hamiltonian, P_F(m -> n) = P_R(n -> m) (microreversibility of the averaged map), so
  // p_R(>=K) comes from an independent run: the reversed protocol from H_B's thermal state.
  // The noise here is strong (the levels left out matter at 1e-4): the check is that the
  // residual is that truncation term and nothing else, which fails for a non-unital map.
  const Protocol move(4, {Schedule::smooth_step("trap.centre", 0, 2)});
  WorkRequest request = quick_request(InitialState::thermal(2));
  request.thermal_tolerance = 1e-6;
  request.reverse_run = true;
  NoiseRequest noise = white_noise("trap.centre", 0.05, NoiseRoute::lindblad);
  noise.sources.push_back({"trap.frequency", NoiseSpectrum::white(0.02)});
  const NoisyWorkResult f = run_noisy_work(quartic_trap(), move, request, noise);
  const NoisyWorkResult r = run_noisy_work(quartic_trap(), move.reversed(), request, noise);
  const int kept = f.transitions.initial_levels();
  REQUIRE(r.transitions.final_levels() > kept);
  // p_R(>=K): the reverse run's weight that ends outside the forward run's kept levels
  const Eigen::MatrixXd& pr = r.transitions.probability;
  double tail = 0;
  for (int n = 0; n < pr.rows(); ++n)
    tail += r.noiseless.forward.initial_weights[std::size_t(n)] * (1 - pr.row(n).head(kept).sum());
  // eps_K of the forward run: its kept levels' Boltzmann weight is 1 - eps_K of all its levels
  const Eigen::VectorXd& ea = f.noiseless.forward.initial_energies;
  const double beta = 2;
  double all = 0, within = 0;
  for (Eigen::Index m = 0; m < ea.size(); ++m) {
    const double b = std::exp(-beta * (ea[m] - ea[0]));
    all += b;
    if (m < kept) within += b;
  }
  const double eps = 1 - within / all;
  const double predicted = (1 - tail) / (1 - eps) - 1;
  const double residual = f.distribution.jarzynski_residual;
  const double shift = f.mean.value - f.noiseless.distribution.mean;
  INFO("Jarzynski residual " << residual << " (noiseless " << f.noiseless.distribution.jarzynski_residual
                             << "), predicted from the reverse run " << predicted << " (p_R(>=K) " << tail
                             << ", eps_K " << eps << "); <W> " << f.mean.value << " against noiseless "
                             << f.noiseless.distribution.mean << "; basis " << f.basis_levels << " levels, " << kept
                             << " kept, " << f.ode_evaluations << " evaluations");
  // what is left: the ODE tolerance (1e-10 per unit time) and the basis truncation of the two
  // runs' final states (their unresolved weights), far below 1e-8
  CHECK(std::abs(residual - predicted) < 1e-8 + f.distribution.unresolved_weight + r.distribution.unresolved_weight);
  CHECK(std::abs(residual) > 1e-6);  // the truncation term is resolved, not rounding
  CHECK(shift > 0.01);               // and the noise matters: it moves <W> by far more
  // a non-unital map fails it: the same matrix with its columns reweighted as an amplitude
  // damping would (P(m -> n) scaled by 1 - 0.01 n, rows renormalised) misses by ~1e-2
  WorkInput wrong = f.noiseless.forward;
  wrong.transitions = f.transitions;
  for (int m = 0; m < kept; ++m) {
    for (int n = 0; n < wrong.transitions.final_levels(); ++n) wrong.transitions.probability(m, n) *= 1 - 0.01 * n;
    wrong.transitions.probability.row(m) /= wrong.transitions.probability.row(m).sum();
  }
  CHECK(std::abs(work_distribution(wrong).jarzynski_residual - predicted) > 1e-3);
}

TEST_CASE("Lindblad and realisations agree within the statistical error on an anharmonic shuttle",
          "[noise][lindblad][validation][heavy]") {
  // The two routes are independent computations of the same average (DEVELOPERS.md, "Noise
  // during the protocol"): split-operator realisations of white traces on the grid, and the
  // master equation in the eigenbasis. A polynomial trap with a quartic term, white position
  // noise, a shuttle of 2 oscillator lengths in 4 time units, from the ground state.
  const Protocol move(4, {Schedule::smooth_step("trap.centre", 0, 2)});
  WorkRequest request = quick_request();
  request.steps = 400;  // dt = 0.01: the traces' discretisation (~(w dt)^2 relative) is far below the errors
  const NoisyWorkResult l =
      run_noisy_work(quartic_trap(), move, request, white_noise("trap.centre", 0.05, NoiseRoute::lindblad));
  const NoisyWorkResult r =
      run_noisy_work(quartic_trap(), move, request, white_noise("trap.centre", 0.05, NoiseRoute::realisations, 2000));
  REQUIRE(l.route_name == "lindblad");
  REQUIRE(r.route_name == "realisations");
  REQUIRE(l.distribution.lines.size() == r.distribution.lines.size());  // the same energies, the same lines
  INFO("<W> Lindblad " << l.mean.value << ", realisations " << r.mean.value << " +- " << r.mean.error
                       << ", noiseless " << l.noiseless.distribution.mean);
  // a few standard errors (4: a fixed seed, so the test is deterministic; a chance failure
  // at 4 sd is 6e-5 per quantity), plus the Lindblad route's ODE tolerance and the floor of
  // lines whose realisations all agree to rounding
  CHECK(std::abs(l.mean.value - r.mean.value) < 4 * r.mean.error);
  CHECK(std::abs(l.variance.value - r.variance.value) < 4 * r.variance.error);
  CHECK(std::abs(l.extra_energy.value - r.extra_energy.value) < 4 * r.extra_energy.error);
  int compared = 0;
  for (std::size_t i = 0; i < l.distribution.lines.size(); ++i) {
    const WorkLine& a = l.distribution.lines[i];
    const WorkLine& b = r.distribution.lines[i];
    INFO("line " << i << " at W = " << a.work << ": Lindblad " << a.probability << ", realisations " << b.probability
                 << " +- " << r.line_error[i]);
    CHECK(a.work == Approx(b.work).margin(1e-12));
    CHECK(std::abs(a.probability - b.probability) < 4 * r.line_error[i] + 1e-9);
    if (b.probability > 1e-6) ++compared;
  }
  CHECK(compared >= 4);
  // the agreement has teeth: the noise moves <W> by many of its standard errors
  CHECK(l.mean.value - l.noiseless.distribution.mean > 5 * r.mean.error);
}

namespace {

// P(n) of the coherent state |alpha> smoothed by a circular Gaussian kernel of mean |beta|^2 =
// nbar: int d^2 beta exp(-|beta|^2 / nbar) / (pi nbar) Poisson_n(|alpha + beta|^2), by the
// trapezoidal rule in Cartesian coordinates (+-12 sd, 481 x 481 nodes): for a smooth integrand
// decaying as a Gaussian it converges faster than any power (common practice; measured: 241
// nodes per axis give the same values to 1e-12), unlike the midpoint rule in polar
// coordinates, whose O(dr^2) error at r = 0 was 8e-6 at 1200 radii.
double smoothed_poisson(int n, double alpha, double nbar) {
  const int nodes = 481;
  const double sd = std::sqrt(nbar / 2), h = 24 * sd / (nodes - 1);
  double sum = 0;
  for (int i = 0; i < nodes; ++i)
    for (int j = 0; j < nodes; ++j) {
      const double u = -12 * sd + i * h, v = -12 * sd + j * h;
      const double mean = (alpha + u) * (alpha + u) + v * v;
      sum += std::exp(-(u * u + v * v) / nbar) / (M_PI * nbar) *
             std::exp(n * std::log(mean) - mean - std::lgamma(n + 1.0));
    }
  return sum * h * h;
}

}  // namespace

TEST_CASE("translated harmonic trap, white position noise: <W> gains w^4 S tau / 4 exactly and P(W) is "
          "the noiseless one smoothed by the noise kernel",
          "[noise][lindblad][validation]") {
  // Reasoning (linear forces; m = hbar = w = 1). H = p^2/2 + (x - c(t) - eps(t))^2 / 2 moves
  // the ground state to a coherent state |alpha_c + beta>, alpha_c from the translation c(t)
  // alone, beta = (i/sqrt 2) int eps(t) e^{it} dt from the noise alone (a linearly forced
  // oscillator; Glauber, Phys. Rev. 131, 2766 (1963), from memory). beta is Gaussian with zero
  // mean and independent of c, so
  //   <W> = <|alpha_c + beta|^2> = |alpha_c|^2 + <|beta|^2> = <W>_noiseless + S tau / 4
  // exactly (the cross term averages to zero; S tau / 4 is the heating of
  // Savard, O'Hara and Thomas, PRA 56, R1095 (1997), from memory, derived in test_noise.cpp),
  // and P(n) is the noiseless Poisson line set at alpha_c + beta averaged over beta's kernel,
  // circular with <|beta|^2> = S tau / 4 when tau is a whole number of half periods
  // (<beta^2> ~ int e^{2it} dt = 0).
  const double tau = 4 * M_PI, s_x = 0.004, distance = 1.0;
  const Protocol move(tau, {Schedule::smooth_step("trap.centre", 0, distance)});
  WorkRequest request = quick_request();
  request.max_initial_levels = 1;
  request.final_margin = 24;
  request.co_moving = true;
  const double heating = s_x * tau / 4;  // = nbar, 0.0126

  // Lindblad: exact for white noise up to the ODE tolerance and the basis (50 levels here)
  const NoisyWorkResult l =
      run_noisy_work(harmonic_trap(), move, request, white_noise("trap.centre", s_x, NoiseRoute::lindblad));
  const double alpha = std::sqrt(l.noiseless.distribution.mean);  // |alpha_c|, from the noiseless run
  INFO("noiseless <W> " << l.noiseless.distribution.mean << ", noisy " << l.mean.value << ", difference "
                        << l.mean.value - l.noiseless.distribution.mean << " against S tau / 4 = " << heating);
  CHECK(std::abs(l.mean.value - l.noiseless.distribution.mean - heating) < 1e-7);
  REQUIRE(l.distribution.lines.size() >= 8);
  for (int n = 0; n < 8; ++n) {
    const double expected = smoothed_poisson(n, alpha, heating);
    INFO("line " << n << ": " << l.distribution.lines[std::size_t(n)].probability << " against " << expected
                 << " (noiseless " << l.noiseless.distribution.lines[std::size_t(n)].probability << ")");
    CHECK(std::abs(l.distribution.lines[std::size_t(n)].probability - expected) < 1e-6);
  }
  // the smoothing matters at this size (else the line checks above would not test it)
  CHECK(std::abs(l.distribution.lines[0].probability - l.noiseless.distribution.lines[0].probability) > 1e-3);

  // The same Lindblad run in the lab frame agrees with the co-moving one (the noise term is
  // evaluated at lab positions in both)
  WorkRequest lab = request;
  lab.co_moving = false;
  const NoisyWorkResult ll =
      run_noisy_work(harmonic_trap(), move, lab, white_noise("trap.centre", s_x, NoiseRoute::lindblad));
  REQUIRE(!ll.noiseless.co_moving);
  REQUIRE(l.noiseless.co_moving);
  INFO("lab-frame noisy <W> " << ll.mean.value << ", co-moving " << l.mean.value);
  CHECK(std::abs(ll.mean.value - l.mean.value) < 1e-6);
  for (int n = 0; n < 8; ++n)
    CHECK(std::abs(ll.distribution.lines[std::size_t(n)].probability - l.distribution.lines[std::size_t(n)].probability) <
          1e-6);

  // Realisations: the same within their statistical error (4 standard errors; traces of linear
  // interpolation between nodes heat by the discrete formula of test_noise.cpp, within 2e-3 of
  // S tau / 4 at these steps, far below the error)
  const NoisyWorkResult r =
      run_noisy_work(harmonic_trap(), move, request, white_noise("trap.centre", s_x, NoiseRoute::realisations, 200));
  INFO("realisations: noisy - noiseless <W> = " << r.mean.value - r.noiseless.distribution.mean << " +- "
                                                << r.mean.error);
  CHECK(std::abs(r.mean.value - r.noiseless.distribution.mean - heating) < 4 * r.mean.error);
  CHECK(r.mean.error < heating / 3);  // the check above can fail
  for (int n = 0; n < 4; ++n) {
    const double expected = smoothed_poisson(n, alpha, heating);
    INFO("line " << n << ": " << r.distribution.lines[std::size_t(n)].probability << " +- "
                 << r.line_error[std::size_t(n)] << " against " << expected);
    CHECK(std::abs(r.distribution.lines[std::size_t(n)].probability - expected) < 4 * r.line_error[std::size_t(n)]);
  }
}

TEST_CASE("Lindblad: a master equation too large for memory is refused before it starts; auto takes realisations",
          "[noise][lindblad]") {
  // the ground state in a basis of 40 levels: about 15 stacks of 16 K^2 bytes = 0.38 MB, above
  // half of a 0.6 MB memory limit (the noiseless run fits in it)
  const Protocol hold(2, {Schedule::constant("trap.centre", 0)});
  WorkRequest request = quick_request();
  request.spectrum.options.memory_limit = 6e5;
  CHECK_THROWS_WITH(
      run_noisy_work(harmonic_trap(), hold, request, white_noise("trap.centre", 0.01, NoiseRoute::lindblad)),
      Catch::Contains("master equation of 1 kept level in a basis of 40") && Catch::Contains("GB, above") &&
          Catch::Contains("noise.route = \"realisations\""));
  const NoisyWorkResult r =
      run_noisy_work(harmonic_trap(), hold, request, white_noise("trap.centre", 0.01, NoiseRoute::automatic, 4));
  INFO(r.route_reason);
  CHECK(r.route_name == "realisations");
  CHECK(r.route_reason.find("needs about") != std::string::npos);
  // with the default limit the same run takes the Lindblad route
  WorkRequest roomy = quick_request();
  CHECK(run_noisy_work(harmonic_trap(), hold, roomy, white_noise("trap.centre", 0.01, NoiseRoute::automatic))
            .route_name == "lindblad");
}
