// Tangent (variational) dynamics of a known right-hand side, for Lyapunov
// exponents from the equations (lib/chaos; Benettin et al.,
// Meccanica 15 (1980) 9; see docs/references.md "Lyapunov exponents").
//
// The augmented state z = [x; vec(Y)] has dim + dim*k entries: the state x
// followed by the dim x k tangent matrix Y stored column by column (Eigen's
// column-major order). It evolves as
//   x' = f(x),   Y' = J(x) Y,
// with J the Jacobian of f by central differences (Dynamics::Jacobian: step
// cbrt(eps) * max(|x_c|, scale_c), relative error about eps^(2/3) ~ 4e-11 for
// smooth f, exact up to rounding for quadratic f such as Lorenz-63). That
// error enters Y' like a small perturbation of the linearization; it is far
// below the integrator's own error at the tolerances used for exponents.
// Integrate z with Rk4Step / IntegrateRk4 / IntegrateDopri5 like any state.
//
// Thread safety: the returned Rhs refers to `d` (which must outlive it) and
// is no more thread-safe than `d`: use it on the thread that owns `d`.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <vector>

#include "physics/dynamics.h"
#include "physics/integrators.h"

namespace lyapcast {

// Right-hand side of the augmented system for k >= 1 tangent vectors.
// `scale`: empty (1.0 per channel) or dim() typical magnitudes for the
// Jacobian's steps (see Dynamics::Jacobian).
Rhs VariationalRhs(const Dynamics& d, int k, std::vector<double> scale = {});

// [x; vec(Y)]. Requires Y.rows() == x.size().
Eigen::VectorXd PackTangent(const Eigen::VectorXd& x, const Eigen::MatrixXd& Y);

// The inverse of PackTangent. Requires z.size() == dim * (1 + k).
void UnpackTangent(const Eigen::VectorXd& z, int dim, int k, Eigen::VectorXd* x, Eigen::MatrixXd* Y);

}  // namespace lyapcast
