// libFuzzer target: a muParser expression as a formula potential (Term::formula, of x, t and
// one named parameter k) and as a protocol formula (Schedule::formula, of t and tau), each
// compiled and evaluated at a few points. Only InputError may come out; NaN or inf values
// are results here (the spectrum refuses a potential that is not finite).
#include <cstddef>
#include <cstdint>
#include <string>

#include "potentials/potential.hpp"
#include "potentials/protocol.hpp"
#include "solver/errors.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string expression(reinterpret_cast<const char*>(data), size);
  try {
    const trapwork::Term term = trapwork::Term::formula("f", expression, {{"k", 2.0}});
    const trapwork::Term copy = term;  // a copy re-creates the parser around its own storage
    for (double x : {-1.0, 0.0, 0.5, 3.0}) (void)copy.value(x, 0.25);
  } catch (const trapwork::InputError&) {
  }
  try {
    const trapwork::Schedule schedule = trapwork::Schedule::formula("trap.centre", expression);
    for (double t : {0.0, 0.5, 1.0}) (void)schedule.evaluate(t, 1.0);
    (void)schedule.final_value(1.0);
  } catch (const trapwork::InputError&) {
  }
  return 0;
}
