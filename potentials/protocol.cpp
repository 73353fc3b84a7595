#include "potentials/protocol.hpp"

#include <muParser.h>

#include <algorithm>
#include <cmath>
#include <set>

#include "solver/errors.hpp"

namespace trapwork {

namespace {
std::string number_text(double x) {
  std::string s = std::to_string(x);
  return s;
}
}  // namespace

// A muParser parser bound to its own t and tau (the parser keeps pointers to them).
struct Schedule::Formula {
  std::string expression;
  double t = 0, tau = 0;
  mu::Parser parser;
  explicit Formula(std::string text) : expression(std::move(text)) {
    parser.DefineVar("t", &t);
    parser.DefineVar("tau", &tau);
    parser.SetExpr(expression);
  }
  double operator()(double time, double duration) {
    t = time;
    tau = duration;
    return parser.Eval();
  }
};

Schedule::Schedule(std::string address, ScheduleForm form) : address_(std::move(address)), form_(form) {}

Schedule Schedule::constant(std::string address, double value) {
  Schedule s(std::move(address), ScheduleForm::constant);
  s.from_ = s.to_ = value;
  return s;
}

namespace {
Schedule make_ramp(Schedule s, double from, double to, const std::string& address) {
  if (!std::isfinite(from) || !std::isfinite(to))
    throw InputError(address, number_text(from) + " -> " + number_text(to), "finite start and end values");
  return s;
}
}  // namespace

Schedule Schedule::linear(std::string address, double from, double to) {
  Schedule s(address, ScheduleForm::linear);
  s.from_ = from;
  s.to_ = to;
  return make_ramp(std::move(s), from, to, address);
}

Schedule Schedule::smooth_step(std::string address, double from, double to) {
  Schedule s(address, ScheduleForm::smooth_step);
  s.from_ = from;
  s.to_ = to;
  return make_ramp(std::move(s), from, to, address);
}

Schedule Schedule::smoother_step(std::string address, double from, double to) {
  Schedule s(address, ScheduleForm::smoother_step);
  s.from_ = from;
  s.to_ = to;
  return make_ramp(std::move(s), from, to, address);
}

Schedule Schedule::table(std::string address, std::vector<double> times, std::vector<double> values) {
  if (times.size() != values.size() || times.size() < 2)
    throw InputError(address, std::to_string(times.size()) + " times, " + std::to_string(values.size()) + " values",
                     "at least 2 (time, value) rows");
  for (std::size_t i = 0; i < times.size(); ++i) {
    if (!std::isfinite(times[i]) || !std::isfinite(values[i]))
      throw InputError(address, "row " + std::to_string(i + 1), "finite time and value");
    if (i > 0 && !(times[i] > times[i - 1]))
      throw InputError(address, "time " + number_text(times[i]) + " after " + number_text(times[i - 1]),
                       "strictly increasing times");
  }
  Schedule s(std::move(address), ScheduleForm::table);
  s.times_ = std::move(times);
  s.values_ = std::move(values);
  return s;
}

Schedule Schedule::formula(std::string address, std::string expression) {
  Schedule s(address, ScheduleForm::formula);
  try {
    s.formula_ = std::make_unique<Formula>(expression);
    (*s.formula_)(0.0, 1.0);  // muParser reports unknown variables and syntax errors on first use
  } catch (const mu::Parser::exception_type& e) {
    throw InputError(address, expression, "a formula of t and tau: " + e.GetMsg());
  }
  return s;
}

Schedule::Schedule(const Schedule& o)
    : address_(o.address_), form_(o.form_), from_(o.from_), to_(o.to_), times_(o.times_), values_(o.values_),
      formula_(o.formula_ ? std::make_unique<Formula>(o.formula_->expression) : nullptr), reversed_(o.reversed_) {}
Schedule& Schedule::operator=(const Schedule& o) {
  if (this != &o) *this = Schedule(o);
  return *this;
}
Schedule::Schedule(Schedule&&) noexcept = default;
Schedule& Schedule::operator=(Schedule&&) noexcept = default;
Schedule::~Schedule() = default;

ScheduleValue Schedule::evaluate_forward(double t, double tau, bool at_end) const {
  switch (form_) {
    case ScheduleForm::constant:
      return {from_, 0, 0};
    case ScheduleForm::linear:
    case ScheduleForm::smooth_step:
    case ScheduleForm::smoother_step: {
      // no clamping to [0, 1]: the triple-jump composition evaluates V slightly outside
      // [0, tau], where it needs the smooth continuation to stay fourth order
      const double u = at_end ? 1.0 : (tau > 0 ? t / tau : 0.0);
      double s = u, ds = 1, d2s = 0;  // s(u) and its u-derivatives
      if (form_ == ScheduleForm::smooth_step) {
        s = u * u * (3 - 2 * u);
        ds = 6 * u * (1 - u);
        d2s = 6 - 12 * u;
      } else if (form_ == ScheduleForm::smoother_step) {
        s = u * u * u * (10 + u * (-15 + 6 * u));
        ds = 30 * u * u * (1 - u) * (1 - u);
        d2s = 60 * u * (1 - u) * (1 - 2 * u);
      }
      const double span = to_ - from_;
      if (!(tau > 0)) return {from_ + span * s, 0, 0};
      return {from_ + span * s, span * ds / tau, span * d2s / (tau * tau)};
    }
    case ScheduleForm::table: {
      const double time = at_end ? tau : t;
      auto it = std::upper_bound(times_.begin(), times_.end(), time);
      std::size_t i = it == times_.begin() ? 0 : std::size_t(it - times_.begin()) - 1;
      i = std::min(i, times_.size() - 2);
      const double slope = (values_[i + 1] - values_[i]) / (times_[i + 1] - times_[i]);
      return {values_[i] + slope * (time - times_[i]), slope, 0};
    }
    case ScheduleForm::formula: {
      const double time = at_end ? tau : t;
      auto& f = *formula_;
      // The step follows the protocol's own time scale: with h = 1e-3 max(tau, 1) a box's
      // duration (tau ~ 0.03 in units m L0^2/hbar) got h = tau/30, and a designed wall ramp's
      // acceleration, which the wall route needs, was off by 3e-4 (measured). Rounding error
      // ~ eps |f| / (h^2 |f''|) ~ 1e-10 |f| / |change| stays small.
      const double h = 1e-3 * (tau > 0 ? tau : 1.0);
      const double f0 = f(time, tau), fp = f(time + h, tau), fm = f(time - h, tau);
      const double fp2 = f(time + 2 * h, tau), fm2 = f(time - 2 * h, tau);
      return {f0, (fm2 - 8 * fm + 8 * fp - fp2) / (12 * h),
              (-fp2 + 16 * fp - 30 * f0 + 16 * fm - fm2) / (12 * h * h)};
    }
  }
  return {};
}

ScheduleValue Schedule::evaluate(double t, double tau) const {
  if (!reversed_) return evaluate_forward(t, tau, false);
  // lambda_R(t) = lambda(tau - t): first derivative changes sign, second does not
  ScheduleValue v = evaluate_forward(tau - t, tau, false);
  v.rate = -v.rate;
  return v;
}

double Schedule::initial_value(double tau) const {
  return reversed_ ? evaluate_forward(tau, tau, true).value : evaluate_forward(0, tau, false).value;
}

double Schedule::final_value(double tau) const {
  return reversed_ ? evaluate_forward(0, tau, false).value : evaluate_forward(tau, tau, true).value;
}

Schedule Schedule::reversed() const {
  Schedule s(*this);
  s.reversed_ = !reversed_;
  return s;
}

void Schedule::check(double tau) const {
  if (form_ == ScheduleForm::table && (times_.front() > 0 || times_.back() < tau))
    throw InputError(address_, "table over [" + number_text(times_.front()) + ", " + number_text(times_.back()) + "]",
                     "a table covering the protocol [0, " + number_text(tau) + "]");
}

Protocol::Protocol(double tau, std::vector<Schedule> schedules, bool time_reversed)
    : tau_(tau), schedules_(std::move(schedules)), time_reversed_(time_reversed) {
  if (!std::isfinite(tau) || tau < 0) throw InputError("duration", number_text(tau), "a finite duration >= 0");
  std::set<std::string> seen;
  for (const auto& s : schedules_) {
    if (!seen.insert(s.address()).second)
      throw InputError(s.address(), "scheduled twice", "one schedule per parameter");
    s.check(tau_);
  }
}

namespace {
// Soft walls (power_walls, erf_walls) scheduled past each other leave no flat region between
// them: refused, as crossing [box] walls are.
void check_walls_apart(const Potential& p, double t) {
  for (const auto& term : p.terms()) {
    if (term.shape() != Shape::power_walls && term.shape() != Shape::erf_walls) continue;
    const double left = term.parameter("left"), right = term.parameter("right");
    if (!(right > left))
      throw InputError(term.name() + ".right", "right = " + number_text(right) + ", left = " + number_text(left) +
                       " at t = " + number_text(t),
                       "soft walls that stay apart (right > left) over the whole protocol: they meet or cross");
  }
}
}  // namespace

Potential Protocol::at(const Potential& base, double t) const {
  Potential p = base;
  for (const auto& s : schedules_) p.set_parameter(s.address(), s.evaluate(t, tau_).value);
  p.set_time(formula_time(t));
  check_walls_apart(p, t);
  return p;
}

Potential Protocol::initial(const Potential& base) const {
  Potential p = base;
  for (const auto& s : schedules_) p.set_parameter(s.address(), s.initial_value(tau_));
  p.set_time(formula_time(0));
  check_walls_apart(p, 0);
  return p;
}

Potential Protocol::final(const Potential& base) const {
  Potential p = base;
  for (const auto& s : schedules_) p.set_parameter(s.address(), s.final_value(tau_));
  p.set_time(formula_time(tau_));
  check_walls_apart(p, tau_);
  return p;
}

void Protocol::check(const Potential& base) const {
  for (const auto& s : schedules_) (void)base.parameter(s.address());
  if (tau_ == 0)
    for (const auto& term : base.terms())
      if (term.depends_on_time())
        throw InputError(term.name() + ".expression", "a formula using t with a sudden switch (duration 0)",
                         "a protocol duration > 0 for a formula that uses t: a sudden switch compares V at t = 0 "
                         "before and after, so the formula's time dependence would have no effect; schedule one of "
                         "its named parameters instead");
}

Protocol Protocol::reversed() const {
  std::vector<Schedule> r;
  r.reserve(schedules_.size());
  for (const auto& s : schedules_) r.push_back(s.reversed());
  return Protocol(tau_, std::move(r), !time_reversed_);
}

const Schedule& Protocol::find(const std::string& address) const {
  for (const auto& s : schedules_)
    if (s.address() == address) return s;
  throw ContractViolation("Protocol::find: no schedule for " + address);
}

std::optional<Translation> Protocol::translation(const Potential& base) const {
  if (schedules_.empty() || base.terms().empty()) return std::nullopt;
  Translation tr;
  for (const auto& term : base.terms()) {
    if (term.shape() == Shape::formula || !term.has_parameter("centre")) return std::nullopt;
    tr.addresses.push_back(term.name() + ".centre");
  }
  if (tr.addresses.size() != schedules_.size()) return std::nullopt;
  for (const auto& a : tr.addresses)
    if (std::none_of(schedules_.begin(), schedules_.end(), [&](const Schedule& s) { return s.address() == a; }))
      return std::nullopt;
  // all centres must move by the same displacement
  const Schedule& first = find(tr.addresses.front());
  double scale = 1;
  for (int i = 0; i <= 256; ++i) scale = std::max(scale, std::abs(first.evaluate(tau_ * i / 256.0, tau_).value));
  for (const auto& a : tr.addresses) {
    const Schedule& s = find(a);
    for (int i = 0; i <= 256; ++i) {
      const double t = tau_ * i / 256.0;
      const double d1 = first.evaluate(t, tau_).value - first.initial_value(tau_);
      const double d2 = s.evaluate(t, tau_).value - s.initial_value(tau_);
      if (std::abs(d1 - d2) > 1e-12 * scale) return std::nullopt;
    }
    if (std::abs((first.final_value(tau_) - first.initial_value(tau_)) - (s.final_value(tau_) - s.initial_value(tau_))) >
        1e-12 * scale)
      return std::nullopt;
  }
  return tr;
}

std::string Protocol::co_moving_obstacle(const Translation& translation) const {
  for (const auto& a : translation.addresses)
    if (find(a).form() == ScheduleForm::table)
      return "the table ramp of " + a +
             " is piecewise linear: its acceleration, which the co-moving frame needs, is a delta "
             "function at each row, not represented";
  return {};
}

ScheduleValue Protocol::displacement(const Translation& translation, double t) const {
  const Schedule& s = find(translation.addresses.front());
  ScheduleValue v = s.evaluate(t, tau_);
  v.value -= s.initial_value(tau_);
  return v;
}

}  // namespace trapwork
