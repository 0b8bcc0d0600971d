#include "physics/dynamics.h"

#include <fmt/format.h>
#include <muParser.h>

#include <algorithm>
#include <cassert>
#include <cctype>
#include <cfloat>
#include <cmath>
#include <cstdlib>
#include <limits>
#include <numbers>
#include <utility>

namespace lyapcast {
namespace {

std::string Join(const std::vector<std::string>& names) {
  std::string out;
  for (const std::string& n : names) {
    if (!out.empty()) out += ", ";
    out += n;
  }
  return out;
}

bool IsIdentifier(std::string_view s) {
  if (s.empty() || !(std::isalpha(static_cast<unsigned char>(s[0])) || s[0] == '_')) return false;
  return std::all_of(s.begin(), s.end(),
                     [](char c) { return std::isalnum(static_cast<unsigned char>(c)) || c == '_'; });
}

// Position (counted from 1) of a lone '=' (an assignment, also inside "+="
// and the like), or 0. "==", "<=", ">=" and "!=" are comparisons and fine.
std::size_t AssignmentPosition(const std::string& e) {
  for (std::size_t i = 0; i < e.size(); ++i) {
    if (e[i] != '=') continue;
    if (i + 1 < e.size() && e[i + 1] == '=') {
      ++i;  // "==": skip both characters
      continue;
    }
    if (i > 0 && (e[i - 1] == '<' || e[i - 1] == '>' || e[i - 1] == '!')) continue;
    return i + 1;
  }
  return 0;
}

// muparser's error in our words, e.g.
//   unknown variable 'prr' at position 1 in "prr*(dtemp_h - flow)"
// Positions count from 1 (muparser counts from 0 and pads the expression with
// a space, so its end-of-input position is clamped to just past our text).
std::string DescribeParserError(const mu::Parser::exception_type& e, const std::string& expr) {
  const int raw = e.GetPos();
  const std::size_t pos = raw < 0 ? expr.size() : std::min(static_cast<std::size_t>(raw), expr.size());
  const std::string where = fmt::format("at position {} in \"{}\"", pos + 1, expr);
  std::string token = e.GetToken();
  while (!token.empty() && std::isspace(static_cast<unsigned char>(token.back()))) token.pop_back();
  switch (e.GetCode()) {
    case mu::ecUNASSIGNABLE_TOKEN: {
      if (token == "t") return fmt::format("'t' {} is not available: dynamics are autonomous, dx/dt = f(x)", where);
      if (IsIdentifier(token)) {
        std::size_t next = pos + token.size();
        while (next < expr.size() && std::isspace(static_cast<unsigned char>(expr[next]))) ++next;
        const bool call = next < expr.size() && expr[next] == '(';
        return fmt::format("unknown {} '{}' {}", call ? "function" : "variable", token, where);
      }
      return fmt::format("unexpected text '{}' {}", token, where);
    }
    case mu::ecUNEXPECTED_EOF:
      return fmt::format("unexpected end of expression {}", where);
    default: {
      // muparser's text without its own 0-based position, e.g.
      // `Unexpected parenthesis ")" at position 1` -> `unexpected parenthesis ")"`.
      std::string msg = e.GetMsg();
      if (const std::size_t p = msg.find(" at position"); p != std::string::npos) msg.resize(p);
      if (msg.size() > 6 && msg.compare(msg.size() - 6, 6, " found") == 0) msg.resize(msg.size() - 6);
      while (!msg.empty() && (msg.back() == '.' || msg.back() == '!' || msg.back() == ' ')) msg.pop_back();
      if (!msg.empty()) msg[0] = static_cast<char>(std::tolower(static_cast<unsigned char>(msg[0])));
      return fmt::format("{} {}", msg.empty() ? "syntax error" : msg, where);
    }
  }
}

}  // namespace

// Everything the parsers point into lives here, behind a unique_ptr, so the
// addresses bound with DefineVar stay valid when a Dynamics moves.
struct Dynamics::State {
  std::string feed_id;
  std::vector<std::string> channels;
  std::vector<std::string> expressions;     // one per channel
  std::vector<std::string> constant_names;  // in file order
  Micros time_unit = kSecond;
  // vars[0, dim) are the channels, vars[dim, ...) the constants. Sized before
  // the parsers are bound and never resized (that would move the storage).
  std::vector<double> vars;
  std::vector<std::unique_ptr<mu::Parser>> parsers;  // one per channel
  // Scratch for Jacobian(); mutable state is one reason the class is not
  // thread-safe (muparser's lazily built bytecode is the other).
  std::vector<double> xp, fp, fm;

  int dim() const { return static_cast<int>(channels.size()); }

  std::string VariablesHint() const {
    if (constant_names.empty()) {
      return fmt::format("variables are the channels ({}); no constants are defined", Join(channels));
    }
    return fmt::format("variables are the channels ({}) and constants ({})", Join(channels), Join(constant_names));
  }

  // Creates one parser per channel bound to `vars` and parses each expression
  // now (muparser parses lazily on the first Eval). Catches every muparser
  // exception; the error names the feed, the key and the position.
  Status Bind() {
    const std::size_t n = channels.size();
    parsers.clear();
    for (std::size_t c = 0; c < n; ++c) {
      const std::string& expr = expressions[c];
      const std::string key = fmt::format("feeds '{}': dynamics.equations.{}", feed_id, channels[c]);
      if (expr.find_first_not_of(" \t\r\n") == std::string::npos) {
        return Status::Invalid(fmt::format("{}: empty expression at position 1; give an expression in the "
                                           "channels and constants, e.g. \"pr*(y - x)\"; {}",
                                           key, VariablesHint()));
      }
      if (const std::size_t p = AssignmentPosition(expr); p != 0) {
        return Status::Invalid(fmt::format("{}: assignment '=' at position {} in \"{}\"; an expression gives the "
                                           "rate of change and may not assign (use '==' to compare)",
                                           key, p, expr));
      }
      auto parser = std::make_unique<mu::Parser>();
      std::size_t defining = 0;  // index into vars of the name being defined
      try {
        // muparser 2.3.3 defines _pi as 3.141592653589 (13 digits); use the
        // double nearest pi instead. (_e is already exact.)
        parser->DefineConst("_pi", std::numbers::pi);
        for (defining = 0; defining < vars.size(); ++defining) {
          const std::string& name = defining < n ? channels[defining] : constant_names[defining - n];
          parser->DefineVar(name, &vars[defining]);
        }
        parser->SetExpr(expr);
        int results = 0;
        parser->Eval(results);  // forces the parse; the value is irrelevant
        if (results != 1) {
          return Status::Invalid(fmt::format("{}: \"{}\" is a list of {} values; give one expression per channel",
                                             key, expr, results));
        }
      } catch (const mu::Parser::exception_type& e) {
        if (defining < vars.size()) {  // DefineVar failed: the name itself is unusable
          const bool is_channel = defining < n;
          const std::string& name = is_channel ? channels[defining] : constant_names[defining - n];
          return Status::Invalid(fmt::format(
              "feeds '{}': {}: the {} name '{}' cannot be an expression variable ({}); it may clash with a "
              "built-in constant or function of the expression language such as _pi or _e",
              feed_id, is_channel ? "channels" : "dynamics.constants", is_channel ? "channel" : "constant", name,
              e.GetMsg()));
        }
        return Status::Invalid(
            fmt::format("{}: {}; {}", key, DescribeParserError(e, expr), VariablesHint()));
      } catch (const std::exception& e) {
        return Status::Invalid(fmt::format("{}: cannot compile \"{}\": {}", key, expr, e.what()));
      }
      parsers.push_back(std::move(parser));
    }
    return Status::Ok();
  }
};

Dynamics::Dynamics(std::unique_ptr<State> state) : s_(std::move(state)) {}
Dynamics::Dynamics(Dynamics&&) noexcept = default;
Dynamics& Dynamics::operator=(Dynamics&&) noexcept = default;
Dynamics::~Dynamics() = default;

Result<Dynamics> Dynamics::Compile(const DynamicsSpec& spec) {
  auto s = std::make_unique<State>();
  s->feed_id = spec.feed_id;
  s->channels = spec.channels;
  s->time_unit = spec.time_unit;
  if (spec.channels.empty()) return Status::Invalid(fmt::format("feeds '{}': the feed has no channels", spec.feed_id));
  if (spec.time_unit <= Micros{}) {
    return Status::Invalid(fmt::format("feeds '{}': dynamics.time_unit: must be a positive duration such as 1s; "
                                       "got {} us",
                                       spec.feed_id, spec.time_unit.count()));
  }
  // LoadConfig already guarantees the next checks; a spec built in code
  // (tests, tools) gets the same clear errors instead of a wrong binding.
  if (spec.equations.size() != spec.channels.size()) {
    return Status::Invalid(fmt::format("feeds '{}': dynamics.equations: has {} equations but the feed has {} "
                                       "channels; give exactly one expression per channel ({})",
                                       spec.feed_id, spec.equations.size(), spec.channels.size(), Join(spec.channels)));
  }
  for (std::size_t c = 0; c < spec.channels.size(); ++c) {
    if (spec.equations[c].first != spec.channels[c]) {
      return Status::Invalid(fmt::format("feeds '{}': dynamics.equations: equation {} is for '{}' but channel {} is "
                                         "'{}'; give the equations in channel order ({})",
                                         spec.feed_id, c + 1, spec.equations[c].first, c + 1, spec.channels[c],
                                         Join(spec.channels)));
    }
    s->expressions.push_back(spec.equations[c].second);
  }
  std::vector<double> constant_values;
  for (const auto& [name, value] : spec.constants) {
    const bool repeated = std::find(s->constant_names.begin(), s->constant_names.end(), name) !=
                          s->constant_names.end();
    const bool shadows = std::find(spec.channels.begin(), spec.channels.end(), name) != spec.channels.end();
    if (repeated || shadows || name == "t") {
      return Status::Invalid(fmt::format("feeds '{}': dynamics.constants.{}: {}; constant names must be unique and "
                                         "differ from the channels ({}) and from 't'",
                                         spec.feed_id, name,
                                         repeated ? "defined twice" : (shadows ? "is also a channel" : "is reserved"),
                                         Join(spec.channels)));
    }
    if (!std::isfinite(value)) {
      return Status::Invalid(
          fmt::format("feeds '{}': dynamics.constants.{}: must be a finite number", spec.feed_id, name));
    }
    s->constant_names.push_back(name);
    constant_values.push_back(value);
  }
  s->vars.assign(spec.channels.size(), 0.0);
  s->vars.insert(s->vars.end(), constant_values.begin(), constant_values.end());
  const std::size_t n = spec.channels.size();
  s->xp.resize(n);
  s->fp.resize(n);
  s->fm.resize(n);
  if (Status st = s->Bind(); !st.ok()) return st;
  return Dynamics(std::move(s));
}

Dynamics Dynamics::Clone() const {
  auto s = std::make_unique<State>();
  s->feed_id = s_->feed_id;
  s->channels = s_->channels;
  s->expressions = s_->expressions;
  s->constant_names = s_->constant_names;
  s->time_unit = s_->time_unit;
  s->vars = s_->vars;  // current constant values included
  s->xp.resize(s_->xp.size());
  s->fp.resize(s_->fp.size());
  s->fm.resize(s_->fm.size());
  const Status st = s->Bind();
  // Unreachable: the same expressions and names compiled in Compile().
  if (!st.ok()) std::abort();
  return Dynamics(std::move(s));
}

int Dynamics::dim() const { return s_->dim(); }
Micros Dynamics::time_unit() const { return s_->time_unit; }
const std::vector<std::string>& Dynamics::channels() const { return s_->channels; }
const std::string& Dynamics::feed_id() const { return s_->feed_id; }

void Dynamics::Eval(const double* x, double* dxdt) const {
  const int n = s_->dim();
  std::copy(x, x + n, s_->vars.begin());
  for (int c = 0; c < n; ++c) {
    try {
      dxdt[c] = s_->parsers[static_cast<std::size_t>(c)]->Eval();
    } catch (...) {
      // Parsed expressions do not throw on evaluation (domain errors give NaN
      // or inf); this only keeps exceptions inside the module.
      dxdt[c] = std::numeric_limits<double>::quiet_NaN();
    }
  }
}

void Dynamics::EvalBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* F) const {
  assert(X.rows() == dim());
  F->resize(dim(), X.cols());
  // Eigen is column-major: each column is dim() contiguous doubles.
  for (Eigen::Index i = 0; i < X.cols(); ++i) Eval(X.col(i).data(), F->col(i).data());
}

Status Dynamics::SetConstant(std::string_view name, double value) {
  const auto& names = s_->constant_names;
  const auto it = std::find(names.begin(), names.end(), name);
  if (it == names.end()) {
    return Status::NotFound(fmt::format("feeds '{}': no constant '{}' in the dynamics; constants are ({})",
                                        s_->feed_id, name, Join(names)));
  }
  if (!std::isfinite(value)) {
    return Status::Invalid(fmt::format("feeds '{}': constant '{}' must be finite; got {}", s_->feed_id, name, value));
  }
  s_->vars[s_->channels.size() + static_cast<std::size_t>(it - names.begin())] = value;
  return Status::Ok();
}

std::optional<double> Dynamics::constant(std::string_view name) const {
  const auto& names = s_->constant_names;
  const auto it = std::find(names.begin(), names.end(), name);
  if (it == names.end()) return std::nullopt;
  return s_->vars[s_->channels.size() + static_cast<std::size_t>(it - names.begin())];
}

void Dynamics::Jacobian(const double* x, const double* scale, Eigen::MatrixXd* J) const {
  const int n = dim();
  J->resize(n, n);
  static const double kRelStep = std::cbrt(DBL_EPSILON);  // see the header for why
  std::vector<double>& xp = s_->xp;
  std::vector<double>& fp = s_->fp;
  std::vector<double>& fm = s_->fm;
  std::copy(x, x + n, xp.begin());
  for (int c = 0; c < n; ++c) {
    const double typical = scale != nullptr ? std::abs(scale[c]) : 1.0;
    double base = std::max(std::abs(x[c]), typical);
    if (!(base > 0.0) || !std::isfinite(base)) base = 1.0;
    // Use the step actually representable around x_c, so the divisor matches
    // the difference of the arguments exactly (removes one rounding error).
    volatile double up = x[c] + kRelStep * base;
    const double h = up - x[c];
    xp[static_cast<std::size_t>(c)] = x[c] + h;
    Eval(xp.data(), fp.data());
    xp[static_cast<std::size_t>(c)] = x[c] - h;
    Eval(xp.data(), fm.data());
    xp[static_cast<std::size_t>(c)] = x[c];
    for (int r = 0; r < n; ++r) {
      (*J)(r, c) = (fp[static_cast<std::size_t>(r)] - fm[static_cast<std::size_t>(r)]) / (2.0 * h);
    }
  }
}

void Dynamics::JacobianBatch(const Eigen::MatrixXd& X, const double* scale, std::vector<Eigen::MatrixXd>* J) const {
  assert(X.rows() == dim());
  J->resize(static_cast<std::size_t>(X.cols()));
  for (Eigen::Index i = 0; i < X.cols(); ++i) Jacobian(X.col(i).data(), scale, &(*J)[static_cast<std::size_t>(i)]);
}

}  // namespace lyapcast
