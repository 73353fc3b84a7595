# ctest keys_markdown: examples/scenario-keys.md must be the output of `trapwork keys --markdown`
# (the key reference the scenario reader uses, solver/scenario/keys.cpp). Run by tests/CMakeLists.txt
# with -DTRAPWORK=<the trapwork executable> -DEXPECTED=<examples/scenario-keys.md>.
execute_process(COMMAND ${TRAPWORK} keys --markdown OUTPUT_VARIABLE generated RESULT_VARIABLE rc)
if(NOT rc EQUAL 0)
  message(FATAL_ERROR "trapwork keys --markdown failed (exit ${rc})")
endif()
file(READ ${EXPECTED} expected)
if(NOT generated STREQUAL expected)
  message(FATAL_ERROR "examples/scenario-keys.md differs from `trapwork keys --markdown`; regenerate it with:\n"
                      "  build/trapwork keys --markdown > examples/scenario-keys.md")
endif()
