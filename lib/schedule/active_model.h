// ActiveModel: the version of a feed being served, decoded once.
//
// Built once per promotion (from the candidate a job just trained, or from
// the stored bytes at start-up and on an operator's activation) and then
// shared read-only: the scheduler publishes it behind an atomic shared
// pointer, the drift monitor scores with it, forecasts roll it out and the
// next retraining job warm-starts from it, none of them decoding bytes again.
//
// Immutable after construction; any thread may read it.
#pragma once

#include <memory>

#include "core/data_time.h"
#include "core/status.h"
#include "learn/flow_map.h"
#include "learn/forecast_model.h"
#include "store/model_registry.h"

namespace lyapcast {

struct ActiveModel {
  ModelRecord record;          // with the model file bytes
  std::shared_ptr<const ForecastModel> model;  // never null; float, as trained and as the monitor scores it
  Micros time_unit = kSecond;  // data time per model time unit
};

// Decodes record.file (a float model; a float64 file is rounded). kInternal
// naming the version when the bytes are not a readable model file.
[[nodiscard]] Result<std::shared_ptr<const ActiveModel>> MakeActiveModel(ModelRecord record);

// From a model already in memory (a job's promoted candidate, an upload):
// no decoding. Requires model != null.
std::shared_ptr<const ActiveModel> MakeActiveModel(ModelRecord record, std::shared_ptr<const ForecastModel> model,
                                                   Micros time_unit);

// The flow map behind an active model, for a warm start (null for model
// families that are not a float flow map).
inline const FlowMap<float>* WarmStartNetwork(const ActiveModel& active) {
  return NeuralNetworkOf<float>(*active.model);
}

}  // namespace lyapcast
