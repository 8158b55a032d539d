#pragma once
// Kinetic operator of one channel in the symmetric (mass-scaled) nodal basis.
#include <Eigen/Sparse>

#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

/// T~ = M^{-1/2} K M^{-1/2} on the interior nodes, with K_ij = (1/2) sum_q w_q phi_i'(q) phi_j'(q)
/// assembled element by element (exact for the element polynomials) and M = diag(w) the GLL mass
/// matrix; for radial channels the centrifugal term l(l+1)/(2 r^2) is added to the diagonal.
/// Eigenvectors c of T~ + diag(v) give nodal orbital values u_k = c_k / sqrt(w_k).
Eigen::SparseMatrix<double> scaled_kinetic(const Mesh& mesh, int l);

}  // namespace stillpoint
