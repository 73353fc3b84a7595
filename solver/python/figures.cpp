// Figure data as Python dicts (see figures.hpp).
#include "solver/python/figures.hpp"

#include <pybind11/numpy.h>
#include <pybind11/stl.h>

namespace py = pybind11;
using namespace trapwork;

namespace trapwork_python {

namespace {

py::array_t<double> array(const std::vector<double>& v) {
  py::array_t<double> a(v.size());
  std::copy(v.begin(), v.end(), a.mutable_data());
  return a;
}

py::object optional(const std::optional<double>& v) {
  return v ? py::object(py::float_(*v)) : py::object(py::none());
}

py::dict series(const WorkSeries& s) {
  py::dict d;
  d["label"] = s.label;
  d["work"] = array(s.work);
  d["probability"] = array(s.probability);
  d["density_work"] = array(s.density_work);
  d["density"] = array(s.density);
  return d;
}

const char* axis_name(ProbabilityAxis a) {
  switch (a) {
    case ProbabilityAxis::linear: return "linear";
    case ProbabilityAxis::log: return "log";
    case ProbabilityAxis::linear_and_log: break;
  }
  return "linear_and_log";
}

const char* departure_name(Departure d) {
  switch (d) {
    case Departure::relative: return "relative";
    case Departure::absolute: return "absolute";
    case Departure::none: break;
  }
  return "none";
}

}  // namespace

py::dict figure_dict(const LevelsFigure& f) {
  py::dict d;
  d["kind"] = "levels";
  d["title"] = f.title;
  d["x_label"] = f.x_label;
  d["energy_label"] = f.energy_label;
  py::list panels;
  for (const auto& p : f.panels) {
    py::dict panel;
    panel["title"] = p.title;
    panel["x"] = array(p.x);
    panel["potential"] = array(p.potential);
    panel["energies"] = array(p.energies);
    py::list densities;
    for (const auto& rho : p.densities) densities.append(array(rho));
    panel["densities"] = densities;
    panel["walls"] = array(p.walls);
    panels.append(panel);
  }
  d["panels"] = panels;
  d["density_height"] = f.density_height;
  d["x_min"] = optional(f.x_min);
  d["x_max"] = optional(f.x_max);
  d["energy_min"] = optional(f.energy_min);
  d["energy_max"] = optional(f.energy_max);
  return d;
}

py::dict figure_dict(const WorkFigure& f) {
  py::dict d;
  d["kind"] = "work";
  d["title"] = f.title;
  d["work_label"] = f.work_label;
  d["density_label"] = f.density_label;
  d["result"] = series(f.result);
  d["reference"] = f.reference ? py::object(series(*f.reference)) : py::object(py::none());
  d["mean_work"] = optional(f.mean_work);
  d["free_energy_change"] = optional(f.free_energy_change);
  d["probability_axis"] = axis_name(f.probability_axis);
  d["log_decades"] = f.log_decades;
  d["resolution"] = optional(f.resolution);
  d["resolution_source"] = f.resolution_source;
  return d;
}

namespace {

py::list sweep_points(const std::vector<SweepPoints>& all) {
  py::list points;
  for (const auto& p : all) {
    py::dict e;
    e["label"] = p.label;
    e["x"] = array(p.x);
    e["y"] = array(p.y);
    e["spread"] = array(p.spread);
    points.append(e);
  }
  return points;
}

py::list sweep_curves(const std::vector<SweepCurve>& all) {
  py::list curves;
  for (const auto& c : all) {
    py::dict e;
    e["label"] = c.label;
    e["x"] = array(c.x);
    e["y"] = array(c.y);
    curves.append(e);
  }
  return curves;
}

}  // namespace

py::dict figure_dict(const SweepFigure& f) {
  py::dict d;
  d["kind"] = "sweep";
  d["title"] = f.title;
  d["x_label"] = f.x_label;
  d["y_label"] = f.y_label;
  d["points"] = sweep_points(f.points);
  d["curves"] = sweep_curves(f.curves);
  py::list panels;
  for (const auto& p : f.panels) {
    py::dict e;
    e["y_label"] = p.y_label;
    e["points"] = sweep_points(p.points);
    e["curves"] = sweep_curves(p.curves);
    e["log_y"] = p.log_y;
    panels.append(e);
  }
  d["panels"] = panels;
  d["spread_as_band"] = f.spread_as_band;
  d["log_x"] = f.log_x;
  d["log_y"] = f.log_y;
  d["departure"] = departure_name(f.departure);
  d["departure_label"] = f.departure_label;
  return d;
}

py::dict figure_dict(const ComparisonFigure& f) {
  py::dict d;
  d["kind"] = "comparison";
  d["title"] = f.title;
  d["work_label"] = f.work_label;
  d["count_label"] = f.count_label;
  d["edges"] = array(f.edges);
  d["observed"] = array(f.observed);
  d["expected"] = array(f.expected);
  d["observed_label"] = f.observed_label;
  d["expected_label"] = f.expected_label;
  d["curve_work"] = array(f.curve_work);
  d["curve"] = array(f.curve);
  d["model_mean"] = optional(f.model_mean);
  d["data_mean"] = optional(f.data_mean);
  return d;
}

py::dict figure_dict(const StackedFigure& f) {
  py::dict d;
  d["kind"] = "stack";
  d["title"] = f.title;
  d["x_label"] = f.x_label;
  py::list panels;
  for (const auto& p : f.panels) {
    py::dict panel;
    panel["y_label"] = p.y_label;
    py::list curves;
    for (const auto& c : p.curves) {
      py::dict e;
      e["label"] = c.label;
      e["x"] = array(c.x);
      e["y"] = array(c.y);
      curves.append(e);
    }
    panel["curves"] = curves;
    panel["markers"] = p.markers;
    panels.append(panel);
  }
  d["stack"] = panels;
  return d;
}

}  // namespace trapwork_python
