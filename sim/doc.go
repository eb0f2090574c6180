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
// # Who may import it
//
// sim imports nothing of the project. mpc, server and client import it.
package sim
