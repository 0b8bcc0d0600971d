// The scenario file schema (scenario.h) walked over a yaml-cpp tree with the
// config's strict reader (yaml_reader.h); ConfigError stays in this file.
#include "config/scenario.h"

#include <fmt/format.h>
#include <yaml-cpp/yaml.h>

#include <charconv>
#include <cmath>
#include <cstdlib>
#include <system_error>

#include "config/config.h"
#include "config/yaml_reader.h"

namespace lyapcast {
namespace {

using config_internal::ConfigError;
using config_internal::DurationRule;
using config_internal::MapReader;
using config_internal::RealRange;
using config_internal::Source;
using config_internal::Value;

const char* const kFeedKeys[] = {"feed",  "seed",     "transient",    "from",   "step",
                                 "noise", "gap_rate", "missing_rate", "jitter", "changes"};

std::vector<std::string> FeedKeys() { return {std::begin(kFeedKeys), std::end(kFeedKeys)}; }

std::uint64_t ReadSeed(const Value& v) {
  const char* const allowed = "an integer in [0, 18446744073709551615]";
  const std::string text = v.Text(allowed);
  std::uint64_t seed = 0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), seed);
  if (text.empty() || ec != std::errc() || end != text.data() + text.size()) v.FailMustBe(allowed);
  return seed;
}

// A non-empty list of numbers in `range`, or (when `one_allowed`) a single
// number, returned as a list of one.
std::vector<double> ReadNumbers(const Value& v, RealRange range, bool one_allowed, std::string_view each) {
  const std::string allowed = fmt::format("{}a list with one number per channel, each {}",
                                          one_allowed ? "one number (for every channel) or " : "", each);
  if (one_allowed && v.node().IsScalar()) return {v.Real(range)};
  if (!v.node().IsSequence() || v.node().size() == 0) v.FailMustBe(allowed);
  std::vector<double> out;
  for (const Value& item : v.List(allowed)) out.push_back(item.Real(range));
  return out;
}

ScenarioFeed ReadFeed(const Value& v) {
  const MapReader m = v.Map(FeedKeys());
  ScenarioFeed f;
  const Value id = m.Require("feed", "each entry names a feed of the config, e.g. feed: loop-a");
  f.feed = id.Text("a feed id");
  if (!IsValidFeedId(f.feed)) {
    id.FailMustBe("a feed id: 1 to 64 of a-z, 0-9, '_' and '-', starting with a letter or digit");
  }
  f.lines.feed = id.line();
  if (auto x = m.Get("seed")) f.seed = ReadSeed(*x);
  if (auto x = m.Get("transient")) f.transient = x->Duration(DurationRule::NonNegative());
  if (auto x = m.Get("from")) {
    f.from = ReadNumbers(*x, RealRange::Any(), false, "a finite number");
    f.lines.from = x->line();
  }
  if (auto x = m.Get("step")) f.step = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("noise")) {
    f.noise = ReadNumbers(*x, RealRange::NonNegative(), true, "a number >= 0");
    f.lines.noise = x->line();
  }
  if (auto x = m.Get("gap_rate")) f.gap_rate = x->Real(RealRange::Between(0, 1, false, true));
  if (auto x = m.Get("missing_rate")) f.missing_rate = x->Real(RealRange::Between(0, 1, false, false));
  if (auto x = m.Get("jitter")) f.jitter = x->Real(RealRange::Between(0, 0.4, false, false));
  if (auto x = m.Get("changes")) {
    const char* const allowed = "a list of changes such as [\"ra=35@10m\", \"ra=28..35@5m..15m\"]";
    for (const Value& item : x->List(allowed)) {
      Result<ParameterChange> c = ParseParameterChange(item.Text("a change such as \"ra=35@10m\""));
      if (!c.ok()) item.Fail(c.status().message());
      f.changes.push_back(std::move(c).value());
      f.lines.changes.push_back(item.line());
    }
  }
  return f;
}

Scenario ReadRoot(const Value& root, const std::string& source) {
  if (!root.node().IsMap()) {
    root.Fail(fmt::format("a scenario must be a mapping with the keys duration and feeds; got {}",
                          config_internal::DescribeNode(root.node())));
  }
  const MapReader m = root.Map({"duration", "feeds"});
  Scenario s;
  s.source = source;
  if (auto x = m.Get("duration")) s.duration = x->Duration(DurationRule::Positive());
  const char* const feeds_allowed = "a list of at least one feed, e.g. feeds: [{feed: loop-a, seed: 11}]";
  const Value feeds = m.Require("feeds", feeds_allowed);
  const std::vector<Value> items = feeds.List(feeds_allowed);
  if (items.empty()) feeds.FailMustBe(feeds_allowed);
  for (const Value& item : items) {
    ScenarioFeed f = ReadFeed(item);
    for (const ScenarioFeed& seen : s.feeds) {
      if (seen.feed == f.feed) {
        item.source()->Fail(f.lines.feed, item.path() + ".feed",
                            fmt::format("feed '{}' is already simulated (first at line {}); each feed may appear "
                                        "at most once",
                                        f.feed, seen.lines.feed));
      }
    }
    s.feeds.push_back(std::move(f));
  }
  return s;
}

Scenario ParseOrThrow(std::string_view yaml, const Source& src) {
  const std::vector<YAML::Node> docs = YAML::LoadAll(std::string(yaml));
  if (docs.empty() || docs.front().IsNull()) {
    src.Fail(1, "", "the scenario is empty; it must be a mapping with a 'feeds' list, e.g. feeds: [{feed: loop-a}]");
  }
  if (docs.size() > 1) {
    src.Fail(config_internal::LineOf(docs[1]), "",
             "a second YAML document starts here; a scenario file holds exactly one document");
  }
  return ReadRoot(Value(&src, docs.front(), config_internal::LineOf(docs.front()), ""), src.name());
}

}  // namespace

double ParameterChange::ValueAt(Micros offset) const {
  if (offset >= t2) return to;
  return from + (to - from) * Seconds(offset - t1) / Seconds(t2 - t1);
}

Result<ParameterChange> ParseParameterChange(std::string_view text_view) {
  const std::string text(text_view);
  const auto bad = [&](const std::string& why) {
    return Status::Invalid(fmt::format("'{}': {}; use NAME=VALUE@T (a step) or NAME=A..B@T1..T2 (a ramp), "
                                       "e.g. ra=35@10m or ra=28..35@5m..15m",
                                       text, why));
  };
  const auto eq = text.find('='), at = text.find('@');
  if (eq == std::string::npos || at == std::string::npos || at < eq) return bad("missing '=' or '@'");
  ParameterChange c;
  c.name = text.substr(0, eq);
  const std::string values = text.substr(eq + 1, at - eq - 1), times = text.substr(at + 1);
  const auto number = [](const std::string& s, double* out) {
    char* end = nullptr;
    *out = std::strtod(s.c_str(), &end);
    return !s.empty() && end == s.c_str() + s.size() && std::isfinite(*out);
  };
  const auto vdots = values.find(".."), tdots = times.find("..");
  if ((vdots == std::string::npos) != (tdots == std::string::npos)) return bad("a ramp needs two values and two times");
  if (vdots == std::string::npos) {
    if (!number(values, &c.from)) return bad("'" + values + "' is not a number");
    c.to = c.from;
    auto t = ParseDuration(times);
    if (!t.ok()) return bad(t.status().message());
    c.t1 = c.t2 = *t;
    return c;
  }
  if (!number(values.substr(0, vdots), &c.from) || !number(values.substr(vdots + 2), &c.to)) {
    return bad("values must be numbers");
  }
  auto t1 = ParseDuration(times.substr(0, tdots)), t2 = ParseDuration(times.substr(tdots + 2));
  if (!t1.ok() || !t2.ok()) return bad("times must be durations such as 90s or 5m");
  if (*t2 <= *t1) return bad("the ramp must end after it starts");
  c.t1 = *t1;
  c.t2 = *t2;
  return c;
}

std::string Scenario::Where(std::size_t index, std::string_view key, int line) const {
  if (key.empty()) return fmt::format("{}:{}: feeds[{}]", source, line, index);
  return fmt::format("{}:{}: feeds[{}].{}", source, line, index, key);
}

Result<Scenario> ParseScenario(std::string_view yaml, const std::string& source_name) {
  const Source src(source_name.empty() ? std::string("<string>") : source_name);
  try {
    return ParseOrThrow(yaml, src);
  } catch (const ConfigError& e) {
    return Status::Invalid(e.what());
  } catch (const YAML::Exception& e) {
    const int line = e.mark.line < 0 ? 1 : e.mark.line + 1;
    return Status::Invalid(fmt::format(
        "{}:{}: YAML syntax error: {}; check indentation and quoting (quote changes such as \"ra=38@15m\" if in "
        "doubt)",
        src.name(), line, e.msg));
  } catch (const std::exception& e) {
    return Status::Internal(fmt::format("{}: reading the scenario failed: {}", src.name(), e.what()));
  }
}

Result<Scenario> LoadScenario(const std::filesystem::path& file) {
  auto text = config_internal::ReadYamlFile(file, "scenario");
  if (!text.ok()) return text.status();
  return ParseScenario(*text, file.string());
}

}  // namespace lyapcast
