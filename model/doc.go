// Package model holds the physics of a gravity-drained tank: the value types
// that flow through drainsight (level series, segments, fits), tank geometry,
// the segmentation of a level history into drains and idle periods, the fit of
// the square-root-law outlet constant with its uncertainty, and the simulator
// used by the demo plant and the accuracy studies.
//
// The outlet law is Torricelli's, with a discharge coefficient:
//
//	q_out = K * sqrt(h),  K = Cd * a * sqrt(2 g)   [K in m^2.5/s]
//
// where h is the head above the outlet (m), a the outlet area (m^2), Cd the
// discharge coefficient and g = 9.80665 m/s^2 (standard gravity, 3rd CGPM 1901).
// With A(h) the free-surface area at head h, a clean drain obeys
// A(h) dh/dt = -K sqrt(h). The transform F(h) = ∫_0^h A(s)/sqrt(s) ds makes
// every drain a straight line, F(h(t)) = F(h0) - K t, whatever the shape.
//
// model is the leaf of the dependency graph: it imports only the standard
// library and gonum, performs no I/O and reads no clock. Everything in it is
// deterministic and single-threaded; values are safe to share once built.
// All quantities are SI: metres, seconds, square metres, cubic metres.
package model
