#pragma once
// Figure data (solver/scenario/plot.hpp) as plain Python dicts: numpy arrays for vectors, None
// for an absent optional, "kind": "levels" | "work" | "sweep" | "comparison". The keys are the
// C++ field names, so solver/scenario/plot.hpp documents them.
#include <pybind11/pybind11.h>

#include "solver/scenario/plot.hpp"

namespace trapwork_python {

pybind11::dict figure_dict(const trapwork::LevelsFigure& f);
pybind11::dict figure_dict(const trapwork::WorkFigure& f);
pybind11::dict figure_dict(const trapwork::SweepFigure& f);
pybind11::dict figure_dict(const trapwork::ComparisonFigure& f);
pybind11::dict figure_dict(const trapwork::StackedFigure& f);

}  // namespace trapwork_python
