#include "schedule/active_model.h"

#include <fmt/format.h>


#include "learn/model_file.h"

namespace lyapcast {

Result<std::shared_ptr<const ActiveModel>> MakeActiveModel(ModelRecord record) {
  auto file = Deserialize(record.file);
  if (!file.ok()) {
    return Status::Internal(fmt::format("stored version {}: {}", record.version, file.status().message()));
  }
  auto model = MakeForecastModel(*file, ModelScalar::kFloat32);
  if (!model.ok()) {
    return Status::Internal(fmt::format("stored version {}: {}", record.version, model.status().message()));
  }
  auto active = std::make_shared<ActiveModel>();
  active->model = std::move(model).value();
  active->time_unit = file->time_unit_micros;
  active->record = std::move(record);
  return std::shared_ptr<const ActiveModel>(std::move(active));
}

std::shared_ptr<const ActiveModel> MakeActiveModel(ModelRecord record, std::shared_ptr<const ForecastModel> model,
                                                   Micros time_unit) {
  auto active = std::make_shared<ActiveModel>();
  active->record = std::move(record);
  active->model = std::move(model);
  active->time_unit = time_unit;
  return active;
}

}  // namespace lyapcast
