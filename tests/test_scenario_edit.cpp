// Scenario edits (solver/scenario/scenario_edit.hpp), issue 15.
#include <catch2/catch.hpp>

#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/scenario_edit.hpp"

using namespace trapwork;

TEST_CASE("issue 15: smoke", "[scenario_edit]") {
  const std::string text(default_scenario_text());
  const std::string edited = scenario_text_with_values(text, "default", {{"protocol.duration", "3 us"}});
  CHECK(edited.find("duration = \"3 us\"") != std::string::npos);
}
