#include "schedule/active_model.h"

#include <fmt/format.h>

#include <variant>

#include "learn/model_file.h"

namespace lyapcast {

Result<std::shared_ptr<const ActiveModel>> MakeActiveModel(ModelRecord record) {
  auto file = Deserialize(record.file);
  if (!file.ok()) {
    return Status::Internal(fmt::format("stored version {}: {}", record.version, file.status().message()));
  }
  FlowMap<float> model = std::holds_alternative<FlowMap<float>>(file->model)
                             ? std::get<FlowMap<float>>(file->model)
                             : std::get<FlowMap<double>>(file->model).Cast<float>();
  return MakeActiveModel(std::move(record), std::move(model), file->time_unit_micros);
}

std::shared_ptr<const ActiveModel> MakeActiveModel(ModelRecord record, FlowMap<float> model, Micros time_unit) {
  auto active = std::make_shared<ActiveModel>();
  active->record = std::move(record);
  active->model = std::move(model);
  active->time_unit = time_unit;
  return active;
}

}  // namespace lyapcast
