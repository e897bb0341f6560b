// The Eigen types Plumbline uses, in one place. Fixed sizes where the size is
// known at compile time; dynamic ones for per-profile model dimensions.
#pragma once

#include <Eigen/Core>

namespace plumbline {

using Vector = Eigen::VectorXd;
using Matrix = Eigen::MatrixXd;
using Vector2 = Eigen::Vector2d;
using Matrix2 = Eigen::Matrix2d;

}  // namespace plumbline
