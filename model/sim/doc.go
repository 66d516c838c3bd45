// Package sim simulates gravity-drained tanks and their level sensors, for
// the demo plant, tests and detection studies. It is deterministic: all
// randomness comes from the *rand.Rand passed in.
//
// Physics. With V(h) the volume above the outlet at head h, K(t) the outlet
// constant (zero while the valve is shut, ramped while it opens), K_leak(t)
// a shell leak and q(t) the inflow:
//
//	dV/dt = q(t) - (K(t) + K_leak(t)) sqrt(h)
//
// Without inflow this has an exact solution for any shape, through the head
// transform F(h) = ∫_0^h A(s)/sqrt(s) ds = ∫_0^sqrt(h) 2 A(v²) dv:
//
//	F(h(t)) = F(h(t0)) - ∫_t0^t (K + K_leak) dτ,
//
// which the simulator uses for drains and idle periods (F tabulated with
// 4-point Gauss-Legendre on a grid in sqrt(h), ∫K dτ by Simpson's rule
// between break points, so both are exact to rounding for the piecewise
// linear K used here). A drain stops exactly where F reaches F(0) = 0: the
// head never goes below the outlet. With inflow (fills, disturbed drains)
// the equation is integrated for V with classical RK4 in steps of at most
// 1 s, and a stop level is found by bisection on the last step.
//
// The sensor reports HeadM = level − outlet elevation, plus drift, Gaussian
// noise, spikes and quantisation; it can freeze (stuck) or go silent (gaps).
package sim
