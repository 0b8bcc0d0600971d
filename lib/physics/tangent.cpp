#include "physics/tangent.h"

#include <cassert>
#include <utility>

namespace lyapcast {

Rhs VariationalRhs(const Dynamics& d, int k, std::vector<double> scale) {
  assert(k >= 1);
  assert(scale.empty() || static_cast<int>(scale.size()) == d.dim());
  const int n = d.dim();
  // `J` is scratch carried by the (copyable) closure, so a step allocates nothing.
  return [dyn = &d, n, k, scale = std::move(scale), J = Eigen::MatrixXd(n, n)](const double* z, double* dz) mutable {
    dyn->Eval(z, dz);
    dyn->Jacobian(z, scale.empty() ? nullptr : scale.data(), &J);
    const Eigen::Map<const Eigen::MatrixXd> Y(z + n, n, k);
    Eigen::Map<Eigen::MatrixXd> dY(dz + n, n, k);
    dY.noalias() = J * Y;
  };
}

Eigen::VectorXd PackTangent(const Eigen::VectorXd& x, const Eigen::MatrixXd& Y) {
  assert(Y.rows() == x.size());
  Eigen::VectorXd z(x.size() + Y.size());
  z.head(x.size()) = x;
  z.tail(Y.size()) = Eigen::Map<const Eigen::VectorXd>(Y.data(), Y.size());
  return z;
}

void UnpackTangent(const Eigen::VectorXd& z, int dim, int k, Eigen::VectorXd* x, Eigen::MatrixXd* Y) {
  assert(z.size() == static_cast<Eigen::Index>(dim) * (1 + k));
  *x = z.head(dim);
  *Y = Eigen::Map<const Eigen::MatrixXd>(z.data() + dim, dim, k);
}

}  // namespace lyapcast
