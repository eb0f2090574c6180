// Package server is the tautlined daemon: gRPC services, sessions and their
// state machine, clocks and deadlines, capture recording, logs, metrics,
// health and configuration. It is the shell around the pure core (sim and
// mpc): it owns every socket, file, clock, goroutine and log line.
//
// server imports mpc, sim and proto.
//
// # Use in a program
//
//	cfg := server.DefaultConfig()
//	cfg.Cells = []string{"testdata/demo/cell.json"}
//	cfg.CaptureDir = dir
//	srv, err := server.New(cfg, logger) // logger may be nil
//	lis, err := net.Listen("tcp", "127.0.0.1:0")
//	go srv.Serve(lis)                   // returns nil after Shutdown
//	...
//	srv.Shutdown(ctx)                   // graceful until ctx is done, then hard
//
// New validates the Config (Config.Validate), loads every cell and
// assembles one grpc.Server: chained interceptors that log each call with
// its method and duration (slow ones at warn), the tautline.v1.CellControl
// service, grpc.health.v1 (SERVING for "" and ServiceName) and reflection.
//
// # States (DESIGN §7)
//
//	idle ──ArmCue──▶ standby ──Start──▶ live ──cue end──▶ standby
//	                    ▲                │ ▲
//	        ArmCue ─────┤   bad/stale/   │ │ RecoverTicks usable
//	  (idle, standby,   │   lost feed    ▼ │ ticks in a row
//	   hold)            │              coast ──cue end──▶ standby
//	                    │
//	Stop (any but fault) ──▶ hold      ResetFault: fault ──▶ idle
//
// idle: no cue armed; every observation is answered with the measured joints
// (through the guard) and a NO_CUE_ARMED tick error. standby: a cue is armed
// (a session and its capture exist); targets move the arms to the cue's first
// pose within every limit (after the cue's end: they stay at its last pose).
// Start is refused until the arms are at rest within Config.StartToleranceRad
// of the first pose. live: the planner corrects the cue. coast: the nominal
// cue plays on and the correction in force at entry fades out over
// Config.CoastFadeS (a raised cosine); entered after Config.BadTicksToCoast
// rejected or failed ticks in a row, when the estimator has accepted no
// marker for its stale count, or when the controller is lost. hold: targets
// brake every joint to rest as hard as the acceleration limits allow and then
// stay. fault: like hold, until ResetFault, which ends the session; entered
// when the guard finds the command history outside a bound. Every
// transition is logged at info with its reason and recorded as an event.
//
// # The cue clock
//
// An observation's cue_time_s and capture_time_s are times on the
// controller's clock, whose zero is the controller's own; cue_time_s must
// increase within a stream. The cue starts at the first observation after
// Start: that observation's cue_time_s becomes the cue's first row, and the
// cue then plays with the controller's clock. A command's targets are for
// cue_time_s plus one tick, on the same clock (CellStatus.cue_time_s, by
// contrast, is the position in the cue). A controller that reconnects with its clock
// running on resumes the cue where the clock now is; one whose clock
// restarted resumes it where it stopped.
//
// # One tick
//
// Per observation the compute is: validate the observation → estimator
// update (mpc.Estimator.Observe, then PredictTo for latency) → planner
// feedback (mpc.Planner.Feedback) → guard (mpc.Guard.Apply, or StopTarget in
// hold and fault) → command, which is queued for sending; then, after the
// command has been handed to the transport and Config.PrepareDelayS has
// passed (so the command is written before the prepare takes a core), the
// planner prepares the next tick (Prepare, bounded by
// Config.PrepareBudgetS): the real-time iteration. Every command target
// leaves through the guard, in every state, and so does every preview
// target (chained from the next target), so no input can make a command
// leave the limits. The path allocates nothing in steady state.
//
// # Bad input
//
// An observation with a wrong size (WRONG_SIZE), an unknown marker
// (UNKNOWN_MARKER) or one repeated (DUPLICATE_MARKER), a NaN or infinite
// value (NOT_FINITE) or an absurd one (OUT_OF_RANGE: a time beyond ±1e10 s,
// a joint or coordinate beyond ±1e4), a time that goes backwards or a
// capture after its cue time (TIME_ORDER), a skipped tick_seq (TICK_SEQ),
// markers older than Config.MaxLatencyS (LATE), another cell's name
// (UNKNOWN_CELL), or no armed cue (NO_CUE_ARMED) is answered with a command
// carrying a TickError with that code, naming the field (e.g.
// "markers[3].marker_id") and saying what to fix. The estimator and the planner never see it: the target is
// the state's fallback (live: nominal plus the correction held) through the
// guard. tick_seq resynchronises on the bad tick, so one glitch costs one
// tick. The observation and its command are recorded like any other.
//
// # The controller stream
//
// One Drive stream per cell; its first observation names the cell. A second
// stream for a cell that has one is refused with ALREADY_EXISTS. Three
// goroutines serve a stream: a receiver, the tick compute and a sender with
// a queue of Config.SendQueueTicks commands. The compute never waits for the
// network. A controller that reads slowly first fills gRPC's flow-control
// window, then the queue; when the queue is full the stream is ended with
// RESOURCE_EXHAUSTED and the cell treated as having lost its controller
// (commands are never dropped silently from an open stream, since each
// answers one observation). A stream with no observation for
// Config.StallTimeoutS is ended with DEADLINE_EXCEEDED. A lost controller
// (stall, drop, slow reader, shutdown) sends a live cell to
// Config.OnControllerLoss, coast or hold. A controller that reconnects
// starts a new stream: tick_seq and the clock checks restart, the estimator
// starts afresh, and the guard continues from the last commands sent unless
// the measured joints are further than Config.ReseedToleranceRad from them,
// in which case its history restarts at the measured joints at rest. A
// coasting cell returns to live after Config.RecoverTicks usable ticks.
//
// # Recording
//
// Arming a cue starts a session and its capture (package proto/capture) in
// Config.CaptureDir: a SessionStart that embeds the cell, figure and URDF
// files and the cue (and reference) byte for byte, then every observation
// as received, every command as sent, events (state changes, operator calls,
// controller connects and disconnects, the first bad tick of a run), and a
// SessionEnd when the session is re-armed, reset or the daemon shuts down.
// Records are encoded into the capture's buffer on the tick path; the
// capture's own goroutine fsyncs it every Config.CaptureFlushIntervalS. If
// the disk fails, the error is logged once and the session goes on
// unrecorded.
//
// # Logs and metrics
//
// zap, JSON by default or console. Fields: cell, session, tick, state,
// reason. State changes and calls at info; slow ticks (Config.SlowTickS),
// slow calls, fallbacks and reseeds at warn; one tick in
// Config.DebugEveryTicks at debug.
//
// CellStatus (GetStatus, WatchStatus) carries, besides the state and the
// cue, the session's counters (ticks, rejected observations, fallback
// ticks, coast entries, bounded ticks and bound actions) and the tracking
// error: the RMS distance of the markers of the latest tracker frame the
// estimator took (gate-rejected sightings left out), mapped to the world,
// from the cue's reference at the frame's capture time. It is measured on
// the markers rather than on the estimate, which would need the
// estimator's per-marker offsets added to be comparable.
//
// Prometheus metrics (Server.Metrics; served at /metrics on
// Config.MetricsListen): tick phase durations, ticks by state, fallbacks by
// reason, guard actions by joint and bound, tracking error, rejected
// observations by code, rejected markers, controller connected. Recording
// them allocates nothing.
package server
