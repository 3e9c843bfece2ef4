// Transformations applied to a quantitative trait before its null model is fitted.
#pragma once

#include <Eigen/Dense>

namespace tamis {

// Rank-based inverse normal transform with Blom's offset (Blom 1958):
//   z_i = Phi^-1((rank_i - 3/8) / (n + 1/4)),
// where tied values share their average rank and n counts the finite values.
// Non-finite entries (missing values) are left out of the ranking and come
// back as NaN in their places.
Eigen::VectorXd rank_inverse_normal(const Eigen::VectorXd& values);

}  // namespace tamis
