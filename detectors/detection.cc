#include "detectors/detection.h"

namespace plumbline {

std::string_view ToString(Direction direction) {
  switch (direction) {
    case Direction::kUp: return "up";
    case Direction::kDown: return "down";
    case Direction::kNone: return "none";
  }
  return "none";
}

std::optional<Direction> DirectionFromString(std::string_view text) {
  if (text == "up") return Direction::kUp;
  if (text == "down") return Direction::kDown;
  if (text == "none") return Direction::kNone;
  return std::nullopt;
}

}  // namespace plumbline
