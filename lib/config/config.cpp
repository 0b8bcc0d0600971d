// The config schema (docs/configuration.md "Keys") walked over a yaml-cpp tree.
// Reading and range checks of single values live in yaml_reader.h; this file
// knows the keys, their ranges and the checks that span several keys.
#include "config/config.h"

#include <arpa/inet.h>
#include <fmt/format.h>
#include <netinet/in.h>
#include <yaml-cpp/yaml.h>

#include <algorithm>
#include <charconv>

#include "config/yaml_reader.h"
#include "core/sample.h"  // kMaxChannels

namespace lyapcast {
namespace {

using config_internal::ConfigError;
using config_internal::DurationRule;
using config_internal::IntRange;
using config_internal::Join;
using config_internal::MapReader;
using config_internal::RealRange;
using config_internal::Source;
using config_internal::Value;

constexpr std::uint64_t kMaxLineLimit = 1ULL << 30;

const char* const kEndpointAllowed =
    "host:port with an IPv4 address, a bracketed IPv6 address or localhost and a port 0..65535, "
    "e.g. 127.0.0.1:7301 or \"[::1]:7301\" (quoted)";

bool IsIpv4(const std::string& host) {
  in_addr a{};
  return inet_pton(AF_INET, host.c_str(), &a) == 1;
}

bool IsIpv6(const std::string& host) {
  in6_addr a{};
  return inet_pton(AF_INET6, host.c_str(), &a) == 1;
}

bool IsLocalhostName(std::string_view host) {
  constexpr std::string_view kName = "localhost";
  if (host.size() != kName.size()) return false;
  for (size_t i = 0; i < host.size(); ++i) {
    const char c = host[i] >= 'A' && host[i] <= 'Z' ? static_cast<char>(host[i] - 'A' + 'a') : host[i];
    if (c != kName[i]) return false;
  }
  return true;
}

std::optional<std::uint16_t> ParsePort(std::string_view text) {
  if (text.empty() || text.size() > 5) return std::nullopt;
  unsigned v = 0;
  for (const char c : text) {
    if (c < '0' || c > '9') return std::nullopt;
    v = v * 10 + static_cast<unsigned>(c - '0');
  }
  if (v > 65535) return std::nullopt;
  return static_cast<std::uint16_t>(v);
}

// "host:port" or "[v6]:port"; nullopt when malformed.
std::optional<Endpoint> ParseEndpointText(const std::string& text) {
  std::string host;
  std::string_view port_text;
  if (!text.empty() && text.front() == '[') {
    const size_t close = text.find(']');
    if (close == std::string::npos || close + 1 >= text.size() || text[close + 1] != ':') return std::nullopt;
    host = text.substr(1, close - 1);
    if (!IsIpv6(host)) return std::nullopt;
    port_text = std::string_view(text).substr(close + 2);
  } else {
    const size_t colon = text.rfind(':');
    if (colon == std::string::npos) return std::nullopt;
    host = text.substr(0, colon);
    // An unbracketed IPv6 address would be ambiguous with the port.
    if (!IsIpv4(host) && !IsLocalhostName(host)) return std::nullopt;
    port_text = std::string_view(text).substr(colon + 1);
  }
  const std::optional<std::uint16_t> port = ParsePort(port_text);
  if (!port) return std::nullopt;
  return Endpoint{host, *port};
}

Endpoint ReadEndpoint(const Value& v) {
  const std::optional<Endpoint> e = ParseEndpointText(v.Text(kEndpointAllowed));
  if (!e) v.FailMustBe(kEndpointAllowed);
  return *e;
}

// Relative paths name files next to the config, wherever the daemon runs.
class PathResolver {
 public:
  explicit PathResolver(const std::filesystem::path& source) : base_(source.parent_path()) {}
  std::filesystem::path Resolve(const std::filesystem::path& p) const {
    // Normalized so logs show config/../var/x.db as var/x.db.
    return p.is_relative() && !base_.empty() ? (base_ / p).lexically_normal() : p;
  }

 private:
  std::filesystem::path base_;
};

std::filesystem::path ReadPath(const Value& v, std::string_view example) {
  const std::string allowed = fmt::format("a non-empty file path such as {}", example);
  const std::string text = v.Text(allowed);
  if (text.empty()) v.FailMustBe(allowed);
  return text;
}

// Fails at `lo_key` (or `hi_key`, or the mapping) when lo > hi.
template <typename T, typename Formatter>
void CheckOrder(const MapReader& m, std::string_view lo_key, T lo, std::string_view hi_key, T hi, Formatter format) {
  if (lo <= hi) return;
  const std::string text =
      fmt::format("{} ({}) is above {} ({}); {} must be <= {}", lo_key, format(lo), hi_key, format(hi), lo_key, hi_key);
  if (auto v = m.Get(lo_key)) v->Fail(text);
  if (auto v = m.Get(hi_key)) v->Fail(text);
  m.Fail(text);
}

std::string FormatReal(double v) { return fmt::format("{}", v); }

// --- sections --------------------------------------------------------------

struct ListenRead {
  ListenConfig config;
  std::optional<Value> ingest;  // where listen.ingest was given, for later errors
  std::optional<Value> http;
};

ListenRead ReadListen(const Value& v) {
  const MapReader m = v.Map({"ingest", "http", "allow_remote_without_tokens"});
  ListenRead out;
  if ((out.ingest = m.Get("ingest"))) out.config.ingest = ReadEndpoint(*out.ingest);
  if ((out.http = m.Get("http"))) out.config.http = ReadEndpoint(*out.http);
  if (auto x = m.Get("allow_remote_without_tokens")) out.config.allow_remote_without_tokens = x->Bool();
  return out;
}

LimitsConfig ReadLimits(const Value& v) {
  const MapReader m =
      v.Map({"max_line", "max_connections", "idle_timeout", "commit_every", "commit_batch", "max_future_skew"});
  LimitsConfig c;
  if (auto x = m.Get("max_line")) c.max_line = x->Size(1, kMaxLineLimit);
  if (auto x = m.Get("max_connections")) c.max_connections = x->Int({1});
  if (auto x = m.Get("idle_timeout")) c.idle_timeout = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("commit_every")) c.commit_every = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("commit_batch")) c.commit_batch = x->Int({1});
  if (auto x = m.Get("max_future_skew")) c.max_future_skew = x->Duration(DurationRule::NonNegative());
  return c;
}

StorageConfig ReadStorage(const Value& v) {
  const MapReader m = v.Map({"path", "retention", "keep_models"});
  StorageConfig c;
  if (auto x = m.Get("path")) c.path = ReadPath(*x, "var/lyapcast.db");
  if (auto x = m.Get("retention")) c.retention = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("keep_models")) c.keep_models = x->Int({0});
  return c;
}

AuthConfig ReadAuth(const Value& v) {
  const MapReader m = v.Map({"ingest_token_file", "read_token_file", "admin_token_file"});
  AuthConfig c;
  if (auto x = m.Get("ingest_token_file")) c.ingest_token_file = ReadPath(*x, "/etc/lyapcast/ingest.token");
  if (auto x = m.Get("read_token_file")) c.read_token_file = ReadPath(*x, "/etc/lyapcast/read.token");
  if (auto x = m.Get("admin_token_file")) c.admin_token_file = ReadPath(*x, "/etc/lyapcast/admin.token");
  return c;
}

TrainingConfig ReadTraining(const Value& v) {
  const MapReader m = v.Map({"threads", "lockstep"});
  TrainingConfig c;
  if (auto x = m.Get("threads")) c.threads = x->Int({1});
  if (auto x = m.Get("lockstep")) c.lockstep = x->Bool();
  return c;
}

std::string FeedIdAllowed() {
  return "an id matching [a-z0-9][a-z0-9_-]{0,63} (lower-case letters, digits, '_' and '-'; 1 to 64 characters)";
}

std::string ChannelNameAllowed() {
  return "a name matching [A-Za-z_][A-Za-z0-9_]{0,63} other than 't' (reserved for time)";
}

std::vector<std::string> ReadChannels(const Value& v) {
  const std::string allowed = fmt::format("a list of 1 to {} channel names such as [flow, dtemp_h]", kMaxChannels);
  const std::vector<Value> items = v.List(allowed);
  if (items.empty() || items.size() > static_cast<size_t>(kMaxChannels)) {
    v.Fail(fmt::format("has {} channels; must be {}", items.size(), allowed));
  }
  std::vector<std::string> names;
  for (size_t i = 0; i < items.size(); ++i) {
    const std::string name = items[i].Text(ChannelNameAllowed());
    if (!IsValidChannelName(name)) items[i].FailMustBe(ChannelNameAllowed());
    for (size_t j = 0; j < names.size(); ++j) {
      if (names[j] == name) {
        items[i].Fail(
            fmt::format("duplicate channel name '{}' (also {}[{}]); channel names must be unique within a feed", name,
                        v.path(), j));
      }
    }
    names.push_back(name);
  }
  return names;
}

std::vector<std::string> ReadUnits(const Value& v, size_t channel_count) {
  const std::vector<Value> items = v.List("a list of units, one per channel, such as [m/s, K]");
  std::vector<std::string> units;
  for (const Value& item : items) units.push_back(item.Text("a unit such as m/s, K or \"\" for none"));
  if (!units.empty() && units.size() != channel_count) {
    v.Fail(
        fmt::format("has {} units but the feed has {} channels; give one unit per channel (\"\" for none) or "
                    "leave units out",
                    units.size(), channel_count));
  }
  return units;
}

std::vector<std::pair<std::string, std::string>> ReadEquations(const Value& v,
                                                               const std::vector<std::string>& channels) {
  const MapReader m = v.MapAnyKeys();
  const std::string channel_list = Join(channels);
  for (const MapReader::Entry& e : m.entries()) {
    if (std::find(channels.begin(), channels.end(), e.key) == channels.end()) {
      e.value.source()->Fail(
          e.key_line, e.value.path(),
          fmt::format("'{}' is not a channel of this feed; equations are keyed by channel: {}", e.key, channel_list));
    }
  }
  std::vector<std::pair<std::string, std::string>> out;
  for (const std::string& channel : channels) {
    const std::optional<Value> expr = m.Get(channel);
    if (!expr) {
      m.Fail(fmt::format("no equation for channel '{}'; give exactly one expression per channel ({})", channel,
                         channel_list));
    }
    const char* const allowed = "a non-empty expression in the channels and constants, e.g. \"pr*(dtemp_h - flow)\"";
    const std::string text = expr->Text(allowed);
    if (text.find_first_not_of(" \t") == std::string::npos) expr->FailMustBe(allowed);
    out.emplace_back(channel, text);
  }
  return out;
}

std::vector<std::pair<std::string, double>> ReadConstants(const Value& v, const std::vector<std::string>& channels) {
  const MapReader m = v.MapAnyKeys();
  std::vector<std::pair<std::string, double>> out;
  for (const MapReader::Entry& e : m.entries()) {
    if (!IsValidChannelName(e.key)) {
      e.value.source()->Fail(e.key_line, e.value.path(),
                             fmt::format("'{}' is not a valid constant name; must be {}", e.key, ChannelNameAllowed()));
    }
    if (std::find(channels.begin(), channels.end(), e.key) != channels.end()) {
      e.value.source()->Fail(e.key_line, e.value.path(),
                             fmt::format("'{}' is also a channel name; constant names must differ from the "
                                         "channels ({}) and from 't'",
                                         e.key, Join(channels)));
    }
    out.emplace_back(e.key, e.value.Real(RealRange::Any()));
  }
  return out;
}

ConstraintConfig ReadConstraint(const Value& v) {
  const MapReader m = v.Map({"kind", "weight", "anneal"});
  ConstraintConfig c;
  const char* const kinds = "velocity or residual";
  const Value kind = m.Require("kind", fmt::format("give the constraint kind: {}", kinds));
  const std::string kind_text = kind.Text(kinds);
  if (kind_text == "velocity") {
    c.kind = ConstraintKind::kVelocity;
  } else if (kind_text == "residual") {
    c.kind = ConstraintKind::kResidual;
  } else {
    kind.FailMustBe(kinds);
  }
  if (auto x = m.Get("weight")) c.weight = x->Real(RealRange::NonNegative());
  if (auto x = m.Get("anneal")) {
    const MapReader a = x->Map({"mid", "width"});
    if (auto y = a.Get("mid")) c.anneal.mid = y->Real(RealRange::Between(0, 1, false, false));
    if (auto y = a.Get("width")) c.anneal.width = y->Real(RealRange::Positive());
  }
  return c;
}

std::vector<ConstraintConfig> ReadConstraints(const Value& v) {
  std::vector<ConstraintConfig> out;
  for (const Value& item : v.List("a list of constraints such as [{kind: velocity, weight: 1.0}]")) {
    ConstraintConfig c = ReadConstraint(item);
    for (const ConstraintConfig& seen : out) {
      // Two terms of one kind would only add their weights; say so instead.
      if (seen.kind == c.kind) {
        item.Fail(fmt::format("second '{}' constraint; each kind may appear at most once (velocity, residual)",
                              ConstraintKindName(c.kind)));
      }
    }
    out.push_back(c);
  }
  return out;
}

DynamicsConfig ReadDynamics(const Value& v, const std::vector<std::string>& channels) {
  const MapReader m = v.Map({"time_unit", "equations", "constants", "constraints"});
  DynamicsConfig d;
  if (auto x = m.Get("time_unit")) d.time_unit = x->Duration(DurationRule::Positive());
  d.equations = ReadEquations(
      m.Require("equations", fmt::format("give one expression per channel ({})", Join(channels))), channels);
  if (auto x = m.Get("constants")) d.constants = ReadConstants(*x, channels);
  if (auto x = m.Get("constraints")) d.constraints = ReadConstraints(*x);
  return d;
}

ModelConfig ReadModel(const Value& v) {
  const MapReader m = v.Map({"family", "degree", "denoise", "hidden", "activation", "rollout", "max_gap"});
  ModelConfig c;
  if (auto x = m.Get("family")) {
    const char* const allowed = "neural, polynomial or auto";
    const std::string f = x->Text(allowed);
    if (f == "neural") {
      c.family = ModelFamily::kNeural;
    } else if (f == "polynomial") {
      c.family = ModelFamily::kPolynomial;
    } else if (f == "auto") {
      c.family = ModelFamily::kAuto;
    } else {
      x->FailMustBe(allowed);
    }
  }
  if (auto x = m.Get("degree")) {
    const char* const allowed = "auto or a polynomial degree from 1 to 6";
    const std::string text = x->Text(allowed);
    int degree = 0;
    const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), degree);
    if (text == "auto") {
      c.degrees = {2, 3, 4, 5, 6};
    } else if (ec == std::errc() && end == text.data() + text.size() && degree >= 1 && degree <= 6) {
      c.degrees = {degree};
    } else {
      x->FailMustBe(allowed);
    }
  }
  if (auto x = m.Get("denoise")) {
    const char* const allowed = "auto or off";
    const std::string d = x->Text(allowed);
    if (d == "auto") {
      c.denoise = true;
    } else if (d == "off") {
      c.denoise = false;
    } else {
      x->FailMustBe(allowed);
    }
  }
  if (auto x = m.Get("hidden")) {
    const char* const allowed = "a list of at least one hidden layer width >= 1, e.g. [64, 64]";
    const std::vector<Value> items = x->List(allowed);
    if (items.empty()) x->FailMustBe(allowed);
    c.hidden.clear();
    for (const Value& item : items) c.hidden.push_back(item.Int({1}));
  }
  if (auto x = m.Get("activation")) {
    const char* const allowed = "tanh or silu";
    const std::string a = x->Text(allowed);
    if (a == "tanh") {
      c.activation = Activation::kTanh;
    } else if (a == "silu") {
      c.activation = Activation::kSilu;
    } else {
      x->FailMustBe(allowed);
    }
  }
  if (auto x = m.Get("rollout")) c.rollout = x->Int({1});
  if (auto x = m.Get("max_gap")) c.max_gap = x->Int({1});
  return c;
}

RetrainConfig ReadRetrain(const Value& v) {
  const MapReader m =
      v.Map({"strategy", "lyapunov_fraction", "min_interval", "max_interval", "min_pairs", "replay", "validation",
             "iterations", "batch", "learning_rate", "weight_decay", "clip", "time_budget", "promote_tolerance"});
  RetrainConfig c;
  if (auto x = m.Get("strategy")) {
    const char* const allowed = "supervised (the only training strategy so far)";
    if (x->Text(allowed) != "supervised") x->FailMustBe(allowed);
    c.strategy = RetrainStrategy::kSupervised;
  }
  if (auto x = m.Get("lyapunov_fraction")) c.lyapunov_fraction = x->Real(RealRange::Positive());
  if (auto x = m.Get("min_interval")) c.min_interval = x->Duration(DurationRule::NonNegative());
  if (auto x = m.Get("max_interval")) c.max_interval = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("min_pairs")) c.min_pairs = x->Int({1});
  if (auto x = m.Get("replay")) c.replay = x->Real(RealRange::Between(0, 1, false, true));
  if (auto x = m.Get("validation")) c.validation = x->Real(RealRange::Between(0, 1, true, true));
  if (auto x = m.Get("iterations")) c.iterations = x->Int({1});
  if (auto x = m.Get("batch")) c.batch = x->Int({1});
  if (auto x = m.Get("learning_rate")) c.learning_rate = x->Real(RealRange::Positive());
  if (auto x = m.Get("weight_decay")) c.weight_decay = x->Real(RealRange::NonNegative());
  if (auto x = m.Get("clip")) c.clip = x->Real(RealRange::Positive());
  if (auto x = m.Get("time_budget")) c.time_budget = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("promote_tolerance")) c.promote_tolerance = x->Real(RealRange::NonNegative());
  CheckOrder(m, "min_interval", c.min_interval, "max_interval", c.max_interval, FormatDuration);
  return c;
}

MonitorConfig ReadMonitor(const Value& v) {
  const MapReader m = v.Map({"horizon_tol", "change_threshold", "change_drift"});
  MonitorConfig c;
  if (auto x = m.Get("horizon_tol")) c.horizon_tol = x->Real(RealRange::Positive());
  if (auto x = m.Get("change_threshold")) c.change_threshold = x->Real(RealRange::Positive());
  if (auto x = m.Get("change_drift")) c.change_drift = x->Real(RealRange::NonNegative());
  return c;
}

HealthConfig ReadHealth(const Value& v) {
  // Earlier releases named the levels warn/crit; say what they are called now
  // rather than only "unknown key".
  static constexpr std::pair<const char*, const char*> kRenamed[] = {
      {"drift_warn", "drift_alert"},
      {"drift_crit", "drift_alarm"},
      {"data_age_warn", "data_age_alert"},
      {"data_age_crit", "data_age_alarm"},
      {"model_age_warn_lyapunov", "model_age_alert_lyapunov"},
      {"model_age_crit_lyapunov", "model_age_alarm_lyapunov"}};
  const MapReader any = v.MapAnyKeys();
  for (const auto& [old_key, new_key] : kRenamed) {
    if (auto x = any.Get(old_key)) {
      x->Fail(fmt::format("renamed to {} (health levels are now alert and alarm); rename the key", new_key));
    }
  }
  const MapReader m = v.Map({"drift_alert", "drift_alarm", "data_age_alert", "data_age_alarm",
                             "model_age_alert_lyapunov", "model_age_alarm_lyapunov"});
  HealthConfig c;
  if (auto x = m.Get("drift_alert")) c.drift_alert = x->Real(RealRange::Positive());
  if (auto x = m.Get("drift_alarm")) c.drift_alarm = x->Real(RealRange::Positive());
  if (auto x = m.Get("data_age_alert")) c.data_age_alert = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("data_age_alarm")) c.data_age_alarm = x->Duration(DurationRule::Positive());
  if (auto x = m.Get("model_age_alert_lyapunov")) c.model_age_alert_lyapunov = x->Real(RealRange::Positive());
  if (auto x = m.Get("model_age_alarm_lyapunov")) c.model_age_alarm_lyapunov = x->Real(RealRange::Positive());
  CheckOrder(m, "drift_alert", c.drift_alert, "drift_alarm", c.drift_alarm, FormatReal);
  CheckOrder(m, "data_age_alert", c.data_age_alert, "data_age_alarm", c.data_age_alarm, FormatDuration);
  if (c.model_age_alert_lyapunov && c.model_age_alarm_lyapunov) {
    CheckOrder(m, "model_age_alert_lyapunov", *c.model_age_alert_lyapunov, "model_age_alarm_lyapunov",
               *c.model_age_alarm_lyapunov, FormatReal);
  }
  return c;
}

// The channel a per-channel map's key names (hold, period, quality), or a failure
// naming the key and the feed's channels.
std::size_t ChannelKey(const MapReader::Entry& e, const std::vector<std::string>& channels, std::string_view section) {
  const auto it = std::find(channels.begin(), channels.end(), e.key);
  if (it == channels.end()) {
    e.value.source()->Fail(e.key_line, e.value.path(),
                           fmt::format("'{}' is not a channel of this feed; {} names channels ({})", e.key, section,
                                       Join(channels)));
  }
  return static_cast<std::size_t>(it - channels.begin());
}

// hold or period: {channel: duration}, each channel of the feed at most
// once, each duration > 0; `out` has one entry per channel (0: not given).
void ReadChannelDurations(const Value& v, const std::vector<std::string>& channels, std::string_view section,
                          std::vector<Micros>* out) {
  const MapReader m = v.MapAnyKeys();
  for (const MapReader::Entry& e : m.entries()) {
    (*out)[ChannelKey(e, channels, section)] = e.value.Duration(DurationRule::Positive());
  }
}

// One channel's entry of quality: {range: [lo, hi], bad_values: [...]}.
ChannelQuality ReadChannelQuality(const Value& v) {
  const MapReader m = v.Map({"range", "bad_values"});
  ChannelQuality q;
  if (auto r = m.Get("range")) {
    const char* const allowed = "a list [lo, hi] of two numbers with lo < hi";
    const std::vector<Value> ends = r->List(allowed);
    if (ends.size() != 2) r->FailMustBe(allowed);
    q.lo = ends[0].Real(RealRange::Any());
    q.hi = ends[1].Real(RealRange::Any());
    if (!(*q.lo < *q.hi)) r->FailMustBe(allowed);
  }
  if (auto b = m.Get("bad_values")) {
    for (const Value& x : b->List("a list of numbers such as [-9999, 1e30]")) q.bad_values.push_back(x.Real(RealRange::Any()));
  }
  return q;
}

// quality: {channel: {...}}, each channel of the feed at most once.
void ReadQuality(const Value& v, const std::vector<std::string>& channels, std::vector<ChannelQuality>* quality) {
  const MapReader m = v.MapAnyKeys();
  for (const MapReader::Entry& e : m.entries()) {
    (*quality)[ChannelKey(e, channels, "quality")] = ReadChannelQuality(e.value);
  }
}

// `earlier` are the feeds before this one in `list_path`, for duplicate ids.
FeedConfig ReadFeed(const Value& v, const std::vector<FeedConfig>& earlier, const std::string& list_path) {
  const MapReader m =
      v.Map({"id", "channels", "units", "step", "hold", "period", "quality", "dynamics", "model", "retrain", "monitor",
             "health"});
  FeedConfig f;
  const Value id = m.Require("id", "every feed needs an id such as loop-a");
  f.id = id.Text(FeedIdAllowed());
  if (!IsValidFeedId(f.id)) id.FailMustBe(FeedIdAllowed());
  for (size_t j = 0; j < earlier.size(); ++j) {
    if (earlier[j].id == f.id) {
      id.Fail(fmt::format("duplicate feed id '{}' (also {}[{}].id); feed ids must be unique", f.id, list_path, j));
    }
  }
  f.channels = ReadChannels(m.Require("channels", "list the feed's channels, e.g. [flow, dtemp_h, dtemp_v]"));
  if (auto x = m.Get("units")) f.units = ReadUnits(*x, f.channels.size());
  if (auto x = m.Get("step")) f.step = x->Duration(DurationRule::Positive());
  f.hold.assign(f.channels.size(), Micros{});
  if (auto x = m.Get("hold")) ReadChannelDurations(*x, f.channels, "hold", &f.hold);
  f.period.assign(f.channels.size(), Micros{});
  if (auto x = m.Get("period")) ReadChannelDurations(*x, f.channels, "period", &f.period);
  f.quality.assign(f.channels.size(), ChannelQuality{});
  if (auto x = m.Get("quality")) ReadQuality(*x, f.channels, &f.quality);
  // "dynamics:" left empty reads as no known dynamics, like a missing key.
  if (auto x = m.Get("dynamics"); x && !x->IsNull()) f.dynamics = ReadDynamics(*x, f.channels);
  if (auto x = m.Get("model")) f.model = ReadModel(*x);
  if (auto x = m.Get("retrain")) f.retrain = ReadRetrain(*x);
  if (auto x = m.Get("monitor")) f.monitor = ReadMonitor(*x);
  if (auto x = m.Get("health")) f.health = ReadHealth(*x);
  return f;
}

std::vector<FeedConfig> ReadFeeds(const Value& v) {
  const char* const allowed = "a list of at least one feed, each a mapping with id and channels";
  const std::vector<Value> items = v.List(allowed);
  if (items.empty()) v.FailMustBe(allowed);
  std::vector<FeedConfig> feeds;
  for (const Value& item : items) feeds.push_back(ReadFeed(item, feeds, v.path()));
  return feeds;
}

// Listening beyond loopback without the matching tokens would let anyone on
// the network write samples or read forecasts; it must be a deliberate choice.
void CheckRemoteListeners(const ListenRead& listen, const AuthConfig& auth) {
  if (listen.config.allow_remote_without_tokens) return;
  if (listen.ingest && !IsLoopbackHost(listen.config.ingest.host) && !auth.ingest_token_file) {
    listen.ingest->Fail(fmt::format(
        "{} is not a loopback address and auth.ingest_token_file is not set; set auth.ingest_token_file, listen on "
        "127.0.0.1 or ::1, or set listen.allow_remote_without_tokens: true",
        listen.config.ingest.ToString()));
  }
  if (listen.http && !IsLoopbackHost(listen.config.http.host) && (!auth.read_token_file || !auth.admin_token_file)) {
    std::vector<std::string> missing;
    if (!auth.read_token_file) missing.push_back("auth.read_token_file");
    if (!auth.admin_token_file) missing.push_back("auth.admin_token_file");
    listen.http->Fail(
        fmt::format("{} is not a loopback address and {} {} not set; set {}, listen on 127.0.0.1 or ::1, or set "
                    "listen.allow_remote_without_tokens: true",
                    listen.config.http.ToString(), Join(missing, " and "), missing.size() == 1 ? "is" : "are",
                    Join(missing, " and ")));
  }
}

void ResolvePaths(Config& c, const PathResolver& r) {
  c.storage.path = r.Resolve(c.storage.path);
  for (std::optional<std::filesystem::path>* p :
       {&c.auth.ingest_token_file, &c.auth.read_token_file, &c.auth.admin_token_file}) {
    if (*p) **p = r.Resolve(**p);
  }
}

Config ReadRoot(const Value& root, const std::filesystem::path& source) {
  const char* const top = "listen, limits, storage, auth, training, feeds";
  if (!root.node().IsMap()) {
    root.Fail(fmt::format("the config must be a mapping with the keys {}; got {}", top,
                          config_internal::DescribeNode(root.node())));
  }
  const MapReader m = root.Map({"listen", "limits", "storage", "auth", "training", "feeds"});
  Config c;
  c.source = source;
  ListenRead listen;
  if (auto x = m.Get("listen")) listen = ReadListen(*x);
  c.listen = listen.config;
  if (auto x = m.Get("limits")) c.limits = ReadLimits(*x);
  if (auto x = m.Get("storage")) c.storage = ReadStorage(*x);
  if (auto x = m.Get("auth")) c.auth = ReadAuth(*x);
  if (auto x = m.Get("training")) c.training = ReadTraining(*x);
  c.feeds = ReadFeeds(m.Require("feeds", "list at least one feed, each with an id and channels"));
  CheckRemoteListeners(listen, c.auth);
  ResolvePaths(c, PathResolver(source));
  return c;
}

Config ParseOrThrow(std::string_view yaml, const std::filesystem::path& source, const Source& src) {
  const std::vector<YAML::Node> docs = YAML::LoadAll(std::string(yaml));
  if (docs.empty() || docs.front().IsNull()) {
    src.Fail(1, "",
             "the config is empty; it must be a mapping with at least a 'feeds' list, e.g. "
             "feeds: [{id: loop-a, channels: [flow]}]");
  }
  if (docs.size() > 1) {
    src.Fail(config_internal::LineOf(docs[1]), "",
             "a second YAML document starts here; a config file holds exactly one document");
  }
  return ReadRoot(Value(&src, docs.front(), config_internal::LineOf(docs.front()), ""), source);
}

}  // namespace

std::string Endpoint::ToString() const {
  if (host.find(':') != std::string::npos) return fmt::format("[{}]:{}", host, port);
  return fmt::format("{}:{}", host, port);
}

const char* ModelFamilyName(ModelFamily f) {
  switch (f) {
    case ModelFamily::kNeural: return "neural";
    case ModelFamily::kPolynomial: return "polynomial";
    case ModelFamily::kAuto: return "auto";
  }
  return "?";
}

const char* RetrainStrategyName(RetrainStrategy s) {
  switch (s) {
    case RetrainStrategy::kSupervised: return "supervised";
  }
  return "?";
}

Result<DynamicsSpec> ToDynamicsSpec(const FeedConfig& feed) {
  if (!feed.dynamics) {
    return Status::Invalid(fmt::format("feeds '{}': no dynamics configured; give dynamics.equations to use known "
                                       "dynamics",
                                       feed.id));
  }
  DynamicsSpec spec;
  spec.feed_id = feed.id;
  spec.channels = feed.channels;
  spec.equations = feed.dynamics->equations;
  spec.constants = feed.dynamics->constants;
  spec.time_unit = feed.dynamics->time_unit;
  return spec;
}

DriftMonitorOptions ToDriftMonitorOptions(const FeedConfig& feed) {
  DriftMonitorOptions o;
  o.channels = static_cast<int>(feed.channels.size());
  o.step = feed.step;
  o.max_gap = feed.model.max_gap;
  o.hold = feed.hold;
  o.change_threshold = feed.monitor.change_threshold;
  o.change_drift = feed.monitor.change_drift;
  return o;
}

int FeedConfig::ChannelIndex(std::string_view name) const {
  for (size_t i = 0; i < channels.size(); ++i) {
    if (channels[i] == name) return static_cast<int>(i);
  }
  return -1;
}

int Config::FeedIndex(std::string_view id) const {
  for (size_t i = 0; i < feeds.size(); ++i) {
    if (feeds[i].id == id) return static_cast<int>(i);
  }
  return -1;
}

Result<Config> ParseConfig(std::string_view yaml, const std::filesystem::path& source) {
  const Source src(source.empty() ? std::string("<string>") : source.string());
  try {
    return ParseOrThrow(yaml, source, src);
  } catch (const ConfigError& e) {
    return Status::Invalid(e.what());
  } catch (const YAML::Exception& e) {
    const int line = e.mark.line < 0 ? 1 : e.mark.line + 1;
    return Status::Invalid(fmt::format(
        "{}:{}: YAML syntax error: {}; check indentation and quoting (quote values that start with [ {{ * & ! or "
        "contain ': ', such as \"[::1]:7301\")",
        src.name(), line, e.msg));
  } catch (const std::exception& e) {
    return Status::Internal(fmt::format("{}: reading the config failed: {}", src.name(), e.what()));
  }
}

Result<Config> LoadConfig(const std::filesystem::path& file) {
  auto text = config_internal::ReadYamlFile(file, "config");
  if (!text.ok()) return text.status();
  return ParseConfig(*text, file);
}

bool IsLoopbackHost(std::string_view host) {
  if (host.size() >= 2 && host.front() == '[' && host.back() == ']') host = host.substr(1, host.size() - 2);
  if (IsLocalhostName(host)) return true;
  const std::string h(host);
  in_addr v4{};
  if (inet_pton(AF_INET, h.c_str(), &v4) == 1) {
    return (ntohl(v4.s_addr) >> 24) == 127;
  }
  in6_addr v6{};
  if (inet_pton(AF_INET6, h.c_str(), &v6) == 1) {
    if (IN6_IS_ADDR_LOOPBACK(&v6)) return true;
    // ::ffff:127.x.y.z is IPv4 loopback seen through a dual-stack socket.
    return IN6_IS_ADDR_V4MAPPED(&v6) && v6.s6_addr[12] == 127;
  }
  return false;
}

std::string DescribeConfig(const Config& c) {
  std::string out;
  const auto line = [&out](const std::string& s) {
    out += s;
    out += '\n';
  };
  line(fmt::format("config: {}", c.source.empty() ? std::string("<string>") : c.source.string()));
  line(fmt::format("listen: ingest {}, http {}{}", c.listen.ingest.ToString(), c.listen.http.ToString(),
                   c.listen.allow_remote_without_tokens ? " (remote without tokens allowed)" : ""));
  line(fmt::format("storage: {} (retention {}, keep {} old models per feed)", c.storage.path.string(),
                   FormatDuration(c.storage.retention), c.storage.keep_models));
  line(fmt::format("auth: ingest token {}, read token {}, admin token {}", c.auth.ingest_token_file ? "yes" : "no",
                   c.auth.read_token_file ? "yes" : "no", c.auth.admin_token_file ? "yes" : "no"));
  line(fmt::format("training: {} thread{}{}", c.training.threads, c.training.threads == 1 ? "" : "s",
                   c.training.lockstep ? ", lockstep" : ""));
  line(fmt::format("feeds: {}", c.feeds.size()));
  for (const FeedConfig& f : c.feeds) {
    std::vector<std::string> channels;
    for (size_t i = 0; i < f.channels.size(); ++i) {
      channels.push_back(f.units.empty() || f.units[i].empty() ? f.channels[i]
                                                               : fmt::format("{} [{}]", f.channels[i], f.units[i]));
    }
    std::string dynamics = "dynamics unknown";
    if (f.dynamics) {
      std::vector<std::string> kinds;
      for (const ConstraintConfig& k : f.dynamics->constraints) kinds.push_back(ConstraintKindName(k.kind));
      dynamics = fmt::format("dynamics known (time unit {}, constraints: {})", FormatDuration(f.dynamics->time_unit),
                             kinds.empty() ? std::string("none") : Join(kinds));
    }
    std::vector<std::string> widths;
    for (const int w : f.model.hidden) widths.push_back(std::to_string(w));
    line(fmt::format("  {}: {}; step {}; {}; model {} {}", f.id, Join(channels), FormatDuration(f.step), dynamics,
                     Join(widths, "x"), ActivationName(f.model.activation)));
  }
  return out;
}

}  // namespace lyapcast
