// Package client is the Go client of the tautline API and the home of the
// tautline command (client/cmd/tautline): check, sim, replay, fit, report,
// watch and demo.
//
// # The API client
//
// Dial connects to a daemon (plaintext on loopback, TLS with DialSettings
// otherwise); New wraps an existing connection. The Client's methods are
// the CellControl calls with Go types: LoadCue, ListCues, ArmCue, Start,
// Stop, ResetFault, Status, WatchStatus (a StatusWatch) and Drive (the
// controller stream: Tick sends one observation and waits for its
// command). Every failed call returns a *StatusError that unwraps to one
// of the Err* values of its gRPC code, so callers write
//
//	if errors.Is(err, client.ErrFailedPrecondition) { … }
//
// and show err.Error(), which carries the daemon's message saying what to
// fix. Canceled and timed-out calls also match context.Canceled and
// context.DeadlineExceeded.
//
// # The simulated cell
//
// RunSimCell plays a cue on a simulated plant (sim.Plant with a mismatch
// profile) against a daemon: it loads and arms the cue, sends standby ticks
// until the daemon accepts Start, then one observation per tick (encoder
// joints now, tracker markers as late, noisy and occluded as the profile
// says), applying the daemon's commands or, open-loop, the nominal cue. Its
// SimResult has the figure error against the reference (the cue simulated
// on the cell's nominal model from rest, mpc.SimulateNominal, the same
// reference the daemon tracks when no reference file is given), the
// round-trip latency, and a LimitChecker's count of limit violations.
//
// # Independent limit check
//
// LimitChecker checks joint targets against a cell's limits with plain
// arithmetic on consecutive targets (position; velocity (q−q₋₁)/h;
// acceleration (q−2q₋₁+q₋₂)/h²), sharing no code with the daemon's guard,
// so a guard bug shows as a counted violation rather than being checked by
// itself.
//
// # Captures
//
// ReadCaptureRun reads a capture (of the daemon or of RunSimCell) with its
// embedded cell and cue and pairs observations with commands; Replay feeds
// a capture's observations to a daemon and compares the commands.
//
// client imports proto, and sim and mpc for the simulated cell and
// reports. Its time, sockets and goroutines are its own; sim and mpc stay
// pure.
package client
