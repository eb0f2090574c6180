// Package sim is the physics of a tautline cell: the figure (point masses
// joined by stiff rods), the tension-only strings that hang it from the bars,
// the arms that carry the bars (a URDF subset), the implicit time step that
// advances the figure, and the exact derivatives and multi-step
// sensitivities of that step.
//
// # Units
//
// SI throughout: metres, kilograms, seconds, newtons, radians. The world
// frame is the cell's frame, z up, gravity (0, 0, -9.80665) m/s² (standard
// gravity).
//
// # Purity
//
// sim is part of the pure core. After a file is loaded it does no I/O, keeps
// no clock, starts no goroutine and logs nothing; every function is
// deterministic given its inputs, so a recorded session replays to the same
// bits. A test (purity_test.go) fails if sim or mpc import net, os, time,
// log, grpc or zap. File loading takes bytes and a name for messages; the
// caller reads the file.
//
// # Physics
//
// A figure (Figure, read from a "tautline.figure/1" file by ParseFigure) is
// a set of point masses (nodes) joined by rods; strings (StringLink) hang
// nodes from anchor points that are inputs of every step. A state is the
// positions of all nodes, x ∈ R^{3n}, node i at [3i:3i+3]; velocities are
// differences (x_t − x_{t−1})/h. Anchored nodes stay at their file
// positions: their entries of any input state are ignored, every output
// state holds their file positions, and their sensitivity rows and
// columns are zero.
//
// The potential U(x; a) sums gravity mᵢ·g·zᵢ, rods ½k(|xᵢ − xⱼ| − L)², and
// strings φ(|xₙ − a| − L): a tension-only law whose stiffness rises from 0
// to k as a smoothstep across a ramp of width w (ModelSettings.SlackWidthM,
// default DefaultSlackWidthM = 0.1 mm) centred on the rest length. So a
// string slack by more than w/2 pushes and pulls nothing, one stretched by
// e ≥ w/2 pulls with exactly k·e (Hooke), and the tension is twice
// continuously differentiable (φ is C³), which keeps Newton's method and
// the sensitivities smooth.
//
// Damping enters as dissipation terms of the step, so the step stays the
// minimisation of one function: node drag cᵢ/(2h)|xᵢ − x_tᵢ|² (force
// −cᵢ·vᵢ) and rod damping c/(2h)((d − d_t)·û_t)² with d = xᵢ − xⱼ and û_t
// the rod's direction at the start of the step (force −c·(relative
// velocity along the rod)). Evaluating û at x_t keeps the term a convex
// quadratic in x; its dependence on x_t is differentiated exactly.
//
// Model.Step is backward Euler in position form: x⁺ minimises
//
//	E(x) = 1/(2h²)(x − y)ᵀM(x − y) + U(x; a⁺) + D(x; x_t),  y = 2x_t − x_{t−1}.
//
// Newton's method minimises E from the guess y. The search direction
// solves the exact Hessian when it is positive definite — the usual case,
// as M/h² dominates — and otherwise the Hessian with element projections
// (a compressed rod's negative transverse term clamped at zero), which is
// always positive definite. Measured on the benchmark figures, always
// projecting costs 6, 11 and 55 Newton iterations per step at 20, 60 and
// 150 nodes against 4, 4 and 8 (BenchmarkStepProjectedOnly), because the
// projection turns Newton's quadratic convergence linear wherever a rod is
// compressed. A backtracking line search on E (Armijo) takes the step.
// Convergence: every free node's residual force beyond its rounding level,
// times h²/mᵢ, is within ModelSettings.GradTol (default 1e-10 m). A step
// that does not converge returns ErrNoConvergence; NaN or ±Inf in a state
// or anchor returns ErrNotFinite; in both cases nothing is written.
//
// # Derivatives and sensitivities
//
// At the solution G = ∇E(x⁺) = 0. Step factorises the exact Hessian
// A = ∂G/∂x⁺ (not the projected one) and keeps, beside it, the blocks of
// ∂G/∂x_t = −2M/h² − C/h + (rod damping terms), ∂G/∂x_{t−1} = M/h² and
// ∂G/∂a = −(each string's Hessian). By the implicit function theorem
//
//	dx⁺ = −A⁻¹(∂G/∂x_t·dx_t + ∂G/∂x_{t−1}·dx_{t−1} + ∂G/∂a·da),
//
// one factorisation serving every right-hand side: Workspace.Sensitivity
// (one direction), Workspace.SensitivityMatrices (full Jacobians) and
// Rollout.Tangent (K directions through a whole rollout, factors kept per
// step). All are checked against central differences from gonum's diff/fd.
// Parameter derivatives (string and rod rest lengths and stiffnesses,
// node masses and drags, rod damping; Param) use the same factors:
// Workspace.ParamSensitivity for one step, Rollout.ParamTangent through a
// run, for fitting a model to recorded motion.
// Rollout.RunWarm starts each step's Newton iterations from the previous
// run's states, which saves iterations when a planner re-runs a horizon
// with slightly changed anchors.
//
// # Linear algebra: banded, by measurement
//
// The free nodes are ordered by reverse Cuthill–McKee, so a chain- or
// ladder-like figure's Hessian has a half-bandwidth of 3b + 2 with b the
// node bandwidth (b = 2 for the benchmark ladders, half-bandwidth 8). The
// factorisation is the package's own band Cholesky (band.go) with a row
// layout that solves many right-hand sides in contiguous inner loops.
// BenchmarkFactorSolve24 (factorise and solve 24 right-hand sides on the
// benchmark figures' step Hessians) measured it against gonum's
// mat.BandCholesky, which also estimates a condition number at every
// factorisation, and dense mat.Cholesky. CPU time per operation, two runs
// on the shared 2-core machine: 12, 40 and 100 µs at 20, 60 and 150 nodes
// for the own routine, 52, 158 and 416 µs for gonum's band routine and
// 46, 308 and 2150 µs for dense (whose cost grows as n³ where the band
// ones grow as n).
//
// # Workspaces
//
// A Model is immutable and may be shared. A Workspace (Model.NewWorkspace)
// or Rollout (Model.NewRollout) owns every buffer; Step, Sensitivity,
// SensitivityMatrices, Rollout.Run and Rollout.Tangent allocate nothing
// after their first call with given sizes (tested with
// testing.AllocsPerRun).
//
// # Parameter fit
//
// The fit (FitProblem, Fit) uses the same factors: FitParam derivatives
// (rest lengths, stiffnesses, masses and mass scales, drag and rod-damping
// scales, tracker offset) are propagated from the rest pose (a fixed point
// of the step: (I − ∂Φ/∂x_t − ∂Φ/∂x_{t−1})·dx*/dθ = ∂Φ/∂θ) through every
// step, checked against diff/fd; LevenbergMarquardt minimises the marker
// residuals within bounds; FitStatistics gives Gauss–Newton standard errors
// and names undetermined directions; MarshalCell writes the fitted cell.
//
// # Who may import it
//
// sim imports nothing of the project. mpc, server and client import it.
package sim
