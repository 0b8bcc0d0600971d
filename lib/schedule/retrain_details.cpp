#include "schedule/retrain_details.h"

#include <nlohmann/json.hpp>

#include <cmath>
#include <limits>

namespace lyapcast {
namespace {

using nlohmann::json;

json Number(double v) { return std::isfinite(v) ? json(v) : json(nullptr); }
json Number(const std::optional<double>& v) { return v ? Number(*v) : json(nullptr); }

template <typename T>
void Read(const json& doc, const char* key, T* out) {
  const auto it = doc.find(key);
  if (it == doc.end()) return;
  if constexpr (std::is_same_v<T, std::string>) {
    if (it->is_string()) *out = it->get<std::string>();
  } else if constexpr (std::is_floating_point_v<T>) {
    if (it->is_number()) *out = it->get<double>();
  } else {
    if (it->is_number_integer()) *out = it->get<T>();
  }
}

std::optional<double> OptionalNumber(const json& v) {
  if (!v.is_number()) return std::nullopt;
  const double x = v.get<double>();
  return std::isfinite(x) ? std::optional<double>(x) : std::nullopt;
}

}  // namespace

std::string ToJson(const RetrainDetails& d) {
  json per_channel = json::array();
  for (double v : d.validation_per_channel) per_channel.push_back(Number(v));
  // nlohmann writes doubles with the shortest text that reads back exactly.
  json doc = {{"strategy", d.strategy},
                    {"trigger", d.trigger},
                    {"iterations", d.iterations},
                    {"seconds", Number(d.seconds)},
                    {"stop", d.stop},
                    {"train_pairs", d.train_pairs},
                    {"selection_pairs", d.selection_pairs},
                    {"validation_pairs", d.validation_pairs},
                    {"validation_per_channel", std::move(per_channel)},
                    {"active_error", Number(d.active_error)},
                    {"refit", d.refit},
                    {"family", d.family},
                    {"family_note", d.family_note},
                    {"family_choice", d.family_choice},
                    {"left_out", d.left_out},
                    {"excluded", d.excluded},
                    {"exponents", {{"data", Number(d.data_exponent)}, {"dynamics", Number(d.dynamics_exponent)}}}};
  if (d.upload) {
    const UploadDetails& u = *d.upload;
    doc["upload"] = {{"file_feed", u.file_feed},
                     {"source", u.source},
                     {"bytes", u.bytes},
                     {"activate", u.activate},
                     {"judged_on", u.judged_on},
                     {"file_validation_error", Number(u.file_validation_error)}};
  }
  return doc.dump();
}

RetrainDetails ParseRetrainDetails(std::string_view text) {
  RetrainDetails d;
  const json doc = json::parse(text, nullptr, /*allow_exceptions=*/false);
  if (!doc.is_object()) return d;
  Read(doc, "strategy", &d.strategy);
  Read(doc, "trigger", &d.trigger);
  Read(doc, "iterations", &d.iterations);
  Read(doc, "seconds", &d.seconds);
  Read(doc, "stop", &d.stop);
  Read(doc, "train_pairs", &d.train_pairs);
  Read(doc, "selection_pairs", &d.selection_pairs);
  Read(doc, "validation_pairs", &d.validation_pairs);
  Read(doc, "refit", &d.refit);
  Read(doc, "family", &d.family);
  Read(doc, "family_note", &d.family_note);
  Read(doc, "family_choice", &d.family_choice);
  Read(doc, "excluded", &d.excluded);
  if (auto it = doc.find("left_out"); it != doc.end() && it->is_array()) {
    for (const json& name : *it) {
      if (name.is_string()) d.left_out.push_back(name.get<std::string>());
    }
  }
  if (const auto it = doc.find("validation_per_channel"); it != doc.end() && it->is_array()) {
    for (const json& v : *it) {
      d.validation_per_channel.push_back(v.is_number() ? v.get<double>() : std::numeric_limits<double>::quiet_NaN());
    }
  }
  if (const auto it = doc.find("active_error"); it != doc.end()) d.active_error = OptionalNumber(*it);
  if (const auto it = doc.find("upload"); it != doc.end() && it->is_object()) {
    UploadDetails u;
    Read(*it, "file_feed", &u.file_feed);
    Read(*it, "source", &u.source);
    Read(*it, "bytes", &u.bytes);
    if (const auto a = it->find("activate"); a != it->end() && a->is_boolean()) u.activate = a->get<bool>();
    Read(*it, "judged_on", &u.judged_on);
    if (const auto e = it->find("file_validation_error"); e != it->end()) u.file_validation_error = OptionalNumber(*e);
    d.upload = std::move(u);
  }
  if (const auto it = doc.find("exponents"); it != doc.end() && it->is_object()) {
    if (const auto e = it->find("data"); e != it->end()) d.data_exponent = OptionalNumber(*e);
    if (const auto e = it->find("dynamics"); e != it->end()) d.dynamics_exponent = OptionalNumber(*e);
  }
  return d;
}

std::optional<double> ValidationRms(const RetrainDetails& d) {
  double sum = 0;
  int n = 0;
  for (double v : d.validation_per_channel) {
    if (!std::isfinite(v)) continue;
    sum += v * v;
    ++n;
  }
  if (n == 0) return std::nullopt;
  return std::sqrt(sum / n);
}

}  // namespace lyapcast
