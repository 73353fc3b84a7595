// Units: parsing lab quantities, the internal unit system, display energy units, error text.
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <functional>
#include <string>
#include <limits>

#include "solver/errors.hpp"
#include "solver/units.hpp"

using namespace trapwork;

namespace {
// CODATA 2018 recommended values (NIST, physics.nist.gov/constants), typed here independently
// of solver/units.hpp: h and kB are exact SI values; u to its 12 digits; hbar = h / (2 pi).
constexpr double codata_h = 6.62607015e-34;
constexpr double codata_kB = 1.380649e-23;
constexpr double codata_u = 1.66053906660e-27;
constexpr double codata_eV = 1.602176634e-19;
constexpr double pi = 3.14159265358979323846;
constexpr double codata_hbar = codata_h / (2 * pi);

// The parser and the test multiply the same factors in possibly different orders, and pow
// with integer powers adds a rounding per factor: a few ulps. 8 eps relative covers up to 8
// roundings (common practice for products of a handful of doubles).
constexpr double eps8 = 8 * std::numeric_limits<double>::epsilon();

bool close(double a, double b, double rel = eps8) {
  return std::abs(a - b) <= rel * std::abs(b);
}

std::string message_of(const std::function<void()>& f) {
  try {
    f();
  } catch (const InputError& e) {
    return e.what();
  }
  return "(no InputError thrown)";
}
}  // namespace

TEST_CASE("parse_quantity reads numbers with lab units into SI", "[units]") {
  struct Case {
    const char* text;
    double si;
    Dimension dimension;
  } cases[] = {
      {"40 u", 40 * codata_u, Dimension::mass()},
      {"87 Da", 87 * codata_u, Dimension::mass()},
      {"1.2 MHz", 1.2e6, Dimension::frequency()},
      {"15 nm", 15e-9, Dimension::length()},
      {"0.1 cm", 1e-3, Dimension::length()},
      {"2 THz", 2e12, Dimension::frequency()},
      {"2.5 \xC2\xB5m", 2.5e-6, Dimension::length()},  // micro sign
      {"3 us", 3e-6, Dimension::time()},
      {"2 uK", 2e-6, Dimension::temperature()},
      {"0.5 h*kHz", 0.5 * codata_h * 1e3, Dimension::energy()},
      {"1 kB*uK", codata_kB * 1e-6, Dimension::energy()},
      {"7 hbar*kHz", 7 * codata_hbar * 1e3, Dimension::energy()},
      {"2 meV", 2e-3 * codata_eV, Dimension::energy()},
      {"2e-3 h*kHz/um^4", 2e-3 * codata_h * 1e3 / 1e-24, Dimension::energy_per_length(4)},
      {"3 J/m^4", 3.0, Dimension::energy_per_length(4)},
      {"1.5e3MHz", 1.5e9, Dimension::frequency()},
      {"  4 h * MHz / nm ^ 3 ", 4 * codata_h * 1e6 / 1e-27, Dimension::energy_per_length(3)},
      {"2 N", 2.0, Dimension::energy_per_length(1)},  // the newton: a force is an energy per length
      {"5 aN", 5e-18, Dimension::energy_per_length(1)},
      {"3e-48 N^2/Hz", 3e-48, Dimension{{2, 2, -3, 0}}},
  };
  for (const auto& c : cases) {
    INFO(c.text);
    const Quantity q = parse_quantity(c.text);
    CHECK_FALSE(q.plain);
    CHECK(q.dimension == c.dimension);
    CHECK(close(q.value_si, c.si));
  }
  const Quantity plain = parse_quantity("3.25");
  CHECK(plain.plain);
  CHECK(plain.value_si == 3.25);
}

TEST_CASE("parse_quantity rejects bad text with the reason and a suggestion", "[units]") {
  try {
    parse_quantity("1 Mhz");
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.suggestion == "MHz");
    CHECK_THAT(e.what(), Catch::Contains("'Mhz' is not known") && Catch::Contains("kHz") &&
                             Catch::Contains("did you mean 'MHz'?"));
  }
  CHECK_THAT(message_of([] { parse_quantity("fast"); }), Catch::Contains("a number"));
  CHECK_THAT(message_of([] { parse_quantity(""); }), Catch::Contains("a number"));
  CHECK_THAT(message_of([] { parse_quantity("1 um^"); }), Catch::Contains("integer power"));
  CHECK_THAT(message_of([] { parse_quantity("1 h*"); }), Catch::Contains("unit name"));
  CHECK_THAT(message_of([] { parse_quantity("1 h+kHz"); }), Catch::Contains("'*' or '/'"));
  CHECK_THAT(message_of([] { parse_quantity("nan MHz"); }), Catch::Contains("finite"));
  CHECK_THAT(message_of([] { parse_quantity("inf"); }), Catch::Contains("finite"));
}

TEST_CASE("trap units of a 40 u ion at 1 MHz", "[units]") {
  const double m = 40 * codata_u, omega = 2 * pi * 1e6;
  const UnitSystem u = UnitSystem::for_trap(m, 1e6);
  CHECK(close(u.length_m, std::sqrt(codata_hbar / (m * omega))));
  CHECK(close(u.energy_J(), codata_h * 1e6));  // E0 = hbar omega = h * 1 MHz
  CHECK(close(u.time_s(), 1 / omega));
  // About 15.9 nm (from memory: the textbook scale of ion-trap ground states).
  CHECK(u.length_m == Approx(15.9e-9).epsilon(0.01));

  // 1 MHz is the angular frequency 1 in these units, and h*MHz the energy 1.
  CHECK(close(u.to_internal(parse_quantity("1 MHz"), Dimension::frequency()), 1.0));
  CHECK(close(u.to_internal(parse_quantity("1 h*MHz"), Dimension::energy()), 1.0));
  CHECK(close(u.to_internal(parse_quantity("1 hbar*MHz"), Dimension::energy()), 1 / (2 * pi)));
  CHECK(close(u.to_internal(parse_quantity("1 um"), Dimension::length()), 1e-6 / u.length_m));
  CHECK(close(u.to_internal(parse_quantity("1 us"), Dimension::time()), omega * 1e-6));
  // A temperature becomes kB T in energy units, whether given as T or as kB*T.
  const double kT = codata_kB * 2e-6 / (codata_h * 1e6);
  CHECK(close(u.to_internal(parse_quantity("2 uK"), Dimension::temperature()), kT));
  CHECK(close(u.to_internal(parse_quantity("2 kB*uK"), Dimension::temperature()), kT));
  // Energy per length^4: SI / (E0 / L0^4).
  const double k4 = 2e-4 * codata_h / 1e-36;
  CHECK(close(u.to_internal(parse_quantity("2e-4 h*Hz/nm^4"), Dimension::energy_per_length(4)),
              k4 * std::pow(u.length_m, 4) / (codata_h * 1e6)));
  // A plain number is already internal.
  CHECK(u.to_internal(parse_quantity("0.25"), Dimension::energy()) == 0.25);
  // to_si inverts to_internal; frequencies come back as ordinary (not angular) Hz.
  CHECK(close(u.to_si(1.0, Dimension::frequency()), 1e6));
  CHECK(
      close(u.to_si(u.to_internal(parse_quantity("3 nm"), Dimension::length()), Dimension::length()), 3e-9));
}

TEST_CASE("box units: L0 is the given length", "[units]") {
  const UnitSystem u = UnitSystem::for_length(87 * codata_u, 2e-6);
  CHECK(u.length_m == 2e-6);
  CHECK(close(u.energy_J(), codata_hbar * codata_hbar / (87 * codata_u * 4e-12)));
  CHECK(close(u.to_internal(parse_quantity("4 um"), Dimension::length()), 2.0));
}

TEST_CASE("a dimension mismatch names the key, the expected dimension and a fix", "[units]") {
  const UnitSystem u = UnitSystem::for_trap(40 * codata_u, 1e6);
  try {
    u.to_internal(parse_quantity("1 mK"), Dimension::energy(), "tweezer.depth", "1 mK");
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.key == "tweezer.depth");
    CHECK(e.suggestion == "1 kB*mK");
    CHECK_THAT(e.what(),
               Catch::StartsWith("tweezer.depth = 1 mK: an energy") && Catch::Contains("not a temperature"));
  }
  try {
    u.to_internal(parse_quantity("5 kHz"), Dimension::energy(), "bump.depth", "5 kHz");
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.suggestion == "5 h*kHz");
  }
  CHECK_THAT(
      message_of([&] { u.to_internal(parse_quantity("1 um"), Dimension::frequency(), "trap.frequency"); }),
      Catch::Contains("a frequency (e.g. \"1 MHz\")") && Catch::Contains("not a length"));
  CHECK_THAT(message_of([&] {
               u.to_internal(parse_quantity("1 h*kHz/um^3"), Dimension::energy_per_length(4), "trap.quartic");
             }),
             Catch::Contains("energy per length^4") && Catch::Contains("not an energy per length^3"));
}

TEST_CASE("display energy units", "[units]") {
  const UnitSystem u = UnitSystem::for_trap(40 * codata_u, 1e6);
  const double omega_ref = 1;
  CHECK(close(energy_unit("h*kHz", u, omega_ref).internal_per_unit, 1e-3));
  CHECK(close(energy_unit("h*MHz", u, omega_ref).internal_per_unit, 1.0));
  CHECK(close(energy_unit("h*Hz", u, omega_ref).internal_per_unit, 1e-6));
  CHECK(close(energy_unit("kB*uK", u, omega_ref).internal_per_unit, codata_kB * 1e-6 / (codata_h * 1e6)));
  CHECK(close(energy_unit("kB*nK", u, omega_ref).internal_per_unit, codata_kB * 1e-9 / (codata_h * 1e6)));
  CHECK(energy_unit("hbar*omega", u, 2.5).internal_per_unit == 2.5);
  CHECK(energy_unit("natural", u, omega_ref).internal_per_unit == 1.0);
  CHECK(energy_unit("kB*mK", u, omega_ref).name == "kB*mK");  // any other energy works too
  CHECK_THAT(message_of([&] { energy_unit("hbar*omega", u, 0); }), Catch::Contains("reference frequency"));
  try {
    energy_unit("h*khz", u, omega_ref);
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.suggestion == "h*kHz");
    CHECK_THAT(e.what(), Catch::Contains("an energy unit"));
  }
  CHECK_THAT(message_of([&] { energy_unit("MHz", u, omega_ref); }), Catch::Contains("an energy unit"));
}

TEST_CASE("InputError text: file:line:column: key = found: expected (did you mean)", "[units][errors]") {
  const InputError full("potential[1].frequency", "\"-1 MHz\"", "a frequency > 0", "", "trap.toml", 7, 13);
  CHECK(std::string(full.what()) == "trap.toml:7:13: potential[1].frequency = \"-1 MHz\": a frequency > 0");
  CHECK(full.line == 7);
  CHECK(full.column == 13);
  CHECK(full.file == "trap.toml");
  const InputError suggested("potential[1].frequncy", "", "unknown key", "frequency", "t.toml", 3, 1);
  CHECK(std::string(suggested.what()) ==
        "t.toml:3:1: potential[1].frequncy: unknown key (did you mean 'frequency'?)");
  CHECK(std::string(InputError("trap.depth", "1 mK", "an energy").what()) == "trap.depth = 1 mK: an energy");
  CHECK(std::string(InputError("", "", "cannot open", "", "x.toml").what()) == "x.toml: cannot open");
  CHECK(InputError::format("", 4, 2, "", "", "bad", "") == "line 4, column 2: bad");
}

TEST_CASE("edit distance and suggestions", "[units]") {
  CHECK(edit_distance("frequncy", "frequency") == 1);
  CHECK(edit_distance("kitten", "sitting") == 3);  // the classic example (common practice)
  CHECK(edit_distance("", "abc") == 3);
  CHECK(closest_name("frequncy", {"centre", "frequency", "quartic"}) == "frequency");
  CHECK(closest_name("xyzzy", {"centre", "frequency"}).empty());  // nothing within 2 edits
}

TEST_CASE("dimensions describe themselves", "[units]") {
  CHECK(Dimension::energy().describe() == "energy");
  CHECK(Dimension::energy_per_length(4).describe() == "energy per length^4");
  CHECK(Dimension{{1, 2, -1, 0}}.describe() == "kg^1 m^2 s^-1");
  CHECK_THAT(expected_quantity(Dimension::length()), Catch::Contains("a length"));
}

// Issue 14: messages and written numbers in the user's units.
TEST_CASE("lab_text picks the prefix that puts the number between 1 and 1000", "[units]") {
  CHECK(lab_text(2.97e-3, Dimension::time()) == "2.97 ms");
  CHECK(lab_text(4e-3, Dimension::time()) == "4 ms");
  CHECK(lab_text(-7.95e-6, Dimension::length()) == "-7.95 um");
  CHECK(lab_text(15.9e-9, Dimension::length()) == "15.9 nm");
  CHECK(lab_text(1e6, Dimension::frequency()) == "1 MHz");
  CHECK(lab_text(65e-6, Dimension::temperature()) == "65 uK");
  CHECK(lab_text(3e-12, Dimension::temperature()) == "0.003 nK");  // below the smallest prefix
  CHECK(lab_text(codata_h * 2e3, Dimension::energy()) == "2 h*kHz");
  CHECK(lab_text(40 * codata_u, Dimension::mass()) == "40 u");
  CHECK(lab_text(codata_h * 0.0157 / 1e-36, Dimension::energy_per_length(4)) == "0.0157 h*Hz/nm^4");
  CHECK(lab_text(0, Dimension::length()) == "0 um");
  CHECK(lab_text(0, Dimension::time()) == "0 us");
  CHECK(lab_text(1.23456789e-3, Dimension::time(), 3) == "1.23 ms");
}

TEST_CASE("MessageUnits: internal values with their internal unit, or lab units", "[units]") {
  const MessageUnits internal;
  CHECK(internal(-500, Dimension::length()) == "-500 L0");
  CHECK(internal(0.000409, Dimension::energy()) == "0.000409 E0");
  CHECK(internal(2.16426, Dimension::time()) == "2.16426 T0");
  CHECK(internal(0.5, Dimension::none()) == "0.5");
  // 87 u in a box of 1 um: T0 = m L0^2 / hbar = 1.37 ms, E0 = hbar^2/(m L0^2)
  const UnitSystem box = UnitSystem::for_length(87 * codata_u, 1e-6);
  const MessageUnits lab{box, std::nullopt};
  const double t0_ms = 87 * codata_u * 1e-12 / codata_hbar * 1e3;
  char expected[32];
  std::snprintf(expected, sizeof expected, "%.6g ms", 2.16426 * t0_ms);
  CHECK(lab(2.16426, Dimension::time()) == expected);
  CHECK(lab(-500, Dimension::length()) == "-500 um");
  // times in the protocol's unit when one is given (a 4 ms protocol: "2.97 ms", not "2967 us")
  std::snprintf(expected, sizeof expected, "%.6g us", 2.16426 * t0_ms * 1e3);
  CHECK((MessageUnits{box, std::nullopt, "us"}(2.16426, Dimension::time())) == expected);
  // energies in the display unit when one is given
  const MessageUnits display{box, energy_unit("kB*nK", box, 0)};
  std::snprintf(expected, sizeof expected, "%.6g kB*nK", 0.000409 * codata_hbar * codata_hbar / (87 * codata_u * 1e-12) / (codata_kB * 1e-9));
  CHECK(display(0.000409, Dimension::energy()) == expected);
}

TEST_CASE("conversion_rounded drops the rounding noise of a unit conversion", "[units]") {
  // 1.5 um through L0 = 15.9 nm and back: 1.5000000000000002 or 1.4999999999999998 before
  const UnitSystem u = UnitSystem::for_trap(40 * codata_u, 1e6);
  int noisy = 0;
  for (double v : {1.5, 0.7, 2.5, 160.0, -400000.0, 0.1, 3e-7}) {
    const double internal = u.to_internal(Quantity{v * 1e-6, Dimension::length(), false}, Dimension::length());
    const double back = internal / u.to_internal(parse_quantity("1 um"), Dimension::length());
    if (back != v) ++noisy;
    CHECK(conversion_rounded(back) == v);
  }
  INFO("values that came back with noise: " << noisy);
  CHECK(conversion_rounded(-399999.99999999994) == -400000.0);
  CHECK(conversion_rounded(1.5000000000000002) == 1.5);
  // a value that needs 15 digits keeps them; an exact 17-digit value is not our case
  CHECK(conversion_rounded(1.23456789012345) == 1.23456789012345);
  CHECK(std::isnan(conversion_rounded(std::nan(""))));
  CHECK(conversion_rounded(-0.0) == 0.0);
}

TEST_CASE("issue 16: angular frequencies are accepted as 2pi*f or rad per time, s^-1 alone is refused", "[units]") {
  const double pi = 3.14159265358979323846;
  for (const char* text : {"2pi*1.5 MHz", "2*pi*1.5 MHz", "2 pi * 1.5 MHz", "2pi 1.5 MHz",
                           "2\xCF\x80\xC3\x97" "1.5 MHz", "2\xCF\x80*1.5 MHz"}) {
    INFO(text);
    const Quantity q = parse_quantity(text);
    CHECK(q.dimension == Dimension::frequency());
    CHECK(q.angular);
    CHECK(q.value_si == Approx(1.5e6).epsilon(1e-15));  // the ordinary frequency f
    CHECK(unit_text(text) == "MHz");
  }
  const Quantity rad = parse_quantity("9.42477796076938 rad/us");  // 2 pi x 1.5 per us
  CHECK(rad.angular);
  CHECK(rad.value_si == Approx(1.5e6).epsilon(1e-14));
  CHECK(parse_quantity("3 rad/s").value_si == Approx(3 / (2 * pi)).epsilon(1e-15));
  CHECK_FALSE(parse_quantity("1.5 MHz").angular);
  CHECK(unit_text("1.5 MHz") == "MHz");
  CHECK(unit_text("3") == "");
  // Ambiguous: a frequency built from seconds says neither f nor 2 pi f.
  for (const char* text : {"9.42e6 1/s", "9.42e6 s^-1", "9.42 /us", "9.42 1 / us"}) {
    INFO(text);
    CHECK_THROWS_WITH(parse_quantity(text),
                      Catch::Contains("write \"1.5 MHz\" (ordinary frequency f) or \"2pi*1.5 MHz\" (angular"));
  }
  // "1/" starts other units too: an inverse length is no frequency.
  CHECK(parse_quantity("2 1/um").dimension == (Dimension{{0, -1, 0, 0}}));
  CHECK_THROWS_WITH(parse_quantity("2pi*3 um"), Catch::Contains("a frequency after 2pi*"));
  CHECK_THROWS_WITH(parse_quantity("2pi*3"), Catch::Contains("a frequency after 2pi*"));
  CHECK_THROWS_WITH(parse_quantity("3 rad"), Catch::Contains("rad only in an angular frequency"));
  CHECK_THROWS_WITH(parse_quantity("3 rad^2/s"), Catch::Contains("rad only in an angular frequency"));
  // Numbers starting with 2 are not taken for 2pi: "2 pm", "2.5 MHz", "20 uK".
  CHECK(parse_quantity("2 pm").value_si == Approx(2e-12));
  CHECK(parse_quantity("2.5 MHz").value_si == Approx(2.5e6));
  CHECK_FALSE(parse_quantity("2.5 MHz").angular);
  CHECK(parse_quantity("20 uK").value_si == Approx(2e-5));
}
