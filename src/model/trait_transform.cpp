// Rank-based inverse normal transform.
#include "tamis/trait_transform.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numeric>
#include <vector>

#include "tamis/distributions.hpp"

namespace tamis {
namespace {

// Blom's plotting position offset (Blom 1958).
constexpr double kBlomOffset = 3.0 / 8.0;

// The indices of the finite values, sorted by value (stable, so the order is
// reproducible).
std::vector<Eigen::Index> order_finite_values(const Eigen::VectorXd& values) {
  std::vector<Eigen::Index> order;
  order.reserve(static_cast<std::size_t>(values.size()));
  for (Eigen::Index idx = 0; idx < values.size(); ++idx) {
    if (std::isfinite(values[idx])) order.push_back(idx);
  }
  std::stable_sort(order.begin(), order.end(),
                   [&](Eigen::Index a, Eigen::Index b) { return values[a] < values[b]; });
  return order;
}

}  // namespace

Eigen::VectorXd rank_inverse_normal(const Eigen::VectorXd& values) {
  Eigen::VectorXd transformed =
      Eigen::VectorXd::Constant(values.size(), std::numeric_limits<double>::quiet_NaN());
  const std::vector<Eigen::Index> order = order_finite_values(values);
  const double count = static_cast<double>(order.size());
  std::size_t run_start = 0;
  while (run_start < order.size()) {
    std::size_t run_end = run_start + 1;  // one past the last value tied with the first
    while (run_end < order.size() && values[order[run_end]] == values[order[run_start]]) ++run_end;
    // Ranks run_start + 1 .. run_end share their mean.
    const double average_rank = 0.5 * static_cast<double>(run_start + 1 + run_end);
    const double z = normal_quantile((average_rank - kBlomOffset) / (count + 0.25));
    for (std::size_t tied_idx = run_start; tied_idx < run_end; ++tied_idx) transformed[order[tied_idx]] = z;
    run_start = run_end;
  }
  return transformed;
}

}  // namespace tamis
