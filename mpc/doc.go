// Package mpc turns a cue (the nominal joint schedule of a cell) and the
// observed figure into corrected joint targets: the cue and its reference
// motion, the estimator that reconstructs the figure's full state from
// partial, noisy and late markers, the receding-horizon Gauss-Newton
// planner, and the guard that enforces every joint bound last.
//
// # Units
//
// SI throughout (m, kg, s, rad); times are cue times in seconds.
//
// # Purity
//
// mpc is part of the pure core: no clock, no goroutine, no I/O, no logging.
// A planner or estimator is a value; each tick is a method call with inputs
// and an output value. Work is done in per-session workspaces sized once, so
// the per-tick path allocates nothing in steady state.
//
// # Guard and QP
//
// The guard (guard.go) is the last step of every tick and the only one safety
// depends on: from any history within bounds it returns targets within
// position, velocity and acceleration limits from which each joint can still
// brake to rest before its limits, for any wish including NaN and ±Inf, and
// says which bounds acted. The planner's step QP is solved by QPSolver, a
// dense Goldfarb–Idnani dual active-set method whose factorisation and
// warm-start set are built in the prepare phase (Factorize, PrepareWarm) so
// the feedback phase only finishes the solve (SolveFactorized).
//
// # Who may import it
//
// mpc imports sim only. server and client import it.
package mpc
