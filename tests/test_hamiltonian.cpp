// Unit tests of solver/hamiltonian: kinetic operators, finite differences, Hermite basis.
#include <catch2/catch.hpp>

#include <cmath>

#include "solver/errors.hpp"
#include "solver/hamiltonian.hpp"

using namespace trapwork;

TEST_CASE("the FFT kinetic operator equals the dense pseudo-spectral one", "[hamiltonian]") {
  for (const Grid& g : {Grid::periodic(-3, 4, 30), Grid::box(-1, 2, 29)}) {
    const std::vector<double> zero(g.size(), 0.0);
    const Eigen::MatrixXd t = dense_hamiltonian(g, zero);
    CHECK((t - t.transpose()).norm() < 1e-12 * t.norm());
    const Eigen::MatrixXd in = Eigen::MatrixXd::Random(Eigen::Index(g.size()), 3);
    KineticOperator kinetic(g, 3);
    Eigen::MatrixXd out;
    kinetic.apply(in, out);
    // Tolerance: rounding in an n-point transform, ~ n eps max|T|.
    CHECK((out - t * in).norm() < 1e-12 * t.norm() * in.norm());
  }
}

TEST_CASE("box kinetic eigenvalues are the particle-in-a-box energies", "[hamiltonian]") {
  const Grid g = Grid::box(0, 1, 63);
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(dense_hamiltonian(g, std::vector<double>(63, 0.0)));
  for (int n = 1; n <= 5; ++n)  // E_n = n^2 pi^2 / 2 (exact in the sine basis)
    CHECK(eig.eigenvalues()(n - 1) == Approx(n * n * M_PI * M_PI / 2).epsilon(1e-12));
}

TEST_CASE("finite-difference Laplacians converge at their order", "[hamiltonian]") {
  // -1/2 d^2/dx^2 of sin(x) on a periodic-free window: interior error ~ C h^p.
  for (int order : {2, 4, 6, 8}) {
    double errors[2];
    int i = 0;
    for (std::size_t n : {40, 80}) {
      const Grid g = Grid::periodic(0, 2 * M_PI, n);
      const auto h = finite_difference_hamiltonian(g, std::vector<double>(n, 0.0), order);
      Eigen::VectorXd f(n);
      for (std::size_t j = 0; j < n; ++j) f(Eigen::Index(j)) = std::sin(g.x(j));
      const Eigen::VectorXd hf = h * f;
      double e = 0;
      for (std::size_t j = n / 4; j < 3 * n / 4; ++j) e = std::max(e, std::abs(hf(Eigen::Index(j)) - 0.5 * f(Eigen::Index(j))));
      errors[i++] = e;
    }
    const double measured = std::log2(errors[0] / errors[1]);
    INFO("order " << order << " errors " << errors[0] << " " << errors[1]);
    CHECK(measured == Approx(order).margin(0.2));
  }
  CHECK_THROWS_AS(finite_difference_hamiltonian(Grid::periodic(0, 1, 8), std::vector<double>(8, 0.0), 3), PhysicsError);
}

TEST_CASE("box finite differences mirror the wavefunction oddly at the walls", "[hamiltonian]") {
  // sin(pi x) on [0, 1] is odd about both walls, so every stencil applies exactly as inside.
  const Grid g = Grid::box(0, 1, 99);
  const auto h = finite_difference_hamiltonian(g, std::vector<double>(99, 0.0), 8);
  Eigen::VectorXd f(99);
  for (int j = 0; j < 99; ++j) f(j) = std::sin(M_PI * g.x(std::size_t(j)));
  const Eigen::VectorXd hf = h * f;
  // The stencil's own error at h = 0.01 is ~ (pi h)^8 / 630 ~ 1e-17: rounding dominates.
  CHECK((hf - 0.5 * M_PI * M_PI * f).cwiseAbs().maxCoeff() < 1e-8);
}

TEST_CASE("the Hermite basis is exact for an oscillator and orthonormal", "[hamiltonian]") {
  HermiteBasis basis{1.7, 0.3, 30};
  const Eigen::MatrixXd h = hermite_hamiltonian(basis, {0, 0, 0.5 * 1.7 * 1.7});
  for (int n = 0; n < 30; ++n) CHECK(h(n, n) == Approx(1.7 * (n + 0.5)).epsilon(1e-13));
  CHECK((h - Eigen::MatrixXd(h.diagonal().asDiagonal())).norm() < 1e-12);
  std::vector<double> x;
  const double dx = 0.01;
  for (double v = -12; v < 12; v += dx) x.push_back(v);
  const Eigen::MatrixXd f = hermite_functions(basis, x, 20);
  const Eigen::MatrixXd overlap = f.transpose() * f * dx;
  CHECK((overlap - Eigen::MatrixXd::Identity(20, 20)).cwiseAbs().maxCoeff() < 1e-10);
  CHECK(f(Eigen::Index(x.size()) - 200, 3) > 0);  // phi_n ~ +x^n for large x
}
