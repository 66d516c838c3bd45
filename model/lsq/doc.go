// Package lsq holds small least-squares solvers: a Levenberg-Marquardt
// minimiser for nonlinear problems with few parameters and a QR-based linear
// least-squares solver, each returning the parameter covariance.
//
// Nonlinear: minimise S(p) = Σ r_i(p)^2 over p in R^n. Each iteration solves
// the damped normal equations (Marquardt's scaling)
//
//	(JᵀJ + λ D) δ = -Jᵀr,   D = diag(JᵀJ) (kept at its running maximum),
//
// accepts the step when S falls and adapts λ from the gain ratio
// ρ = (S(p) - S(p+δ)) / (δᵀ(λDδ - Jᵀr)) (Nielsen's rule: λ *= max(1/3,
// 1-(2ρ-1)^3) on success, λ *= ν, ν *= 2 on failure). At the optimum the
// covariance is s^2 (JᵀJ)^-1 with s^2 = S/(m-n).
//
// Two entry points: Minimize takes a residual function (and optionally an
// analytic Jacobian, otherwise forward differences) and computes the final
// covariance from a column-scaled QR factorisation of J; MinimizeNormal takes
// a function that accumulates JᵀJ and Jᵀr itself, which lets a caller with
// millions of residuals stream them without storing J.
//
// Linear: Linear solves min ||X b - y|| by Householder QR (no normal
// equations) and returns b, its covariance s^2 (RᵀR)^-1, the residual sum of
// squares and R^2.
//
// The solvers are checked against the NIST Statistical Reference Datasets
// (Norris, Pontius, Longley, Misra1a, Chwirut2, DanWood, BoxBOD) under
// testdata/. Everything here is deterministic and allocation-free per
// iteration; values are safe to share once returned.
package lsq
