package server

import (
	"os"
	"runtime"
	"slices"
	"strconv"
	"testing"
	"time"

	pb "tautline/proto/tautline/v1"
)

// BenchmarkDriveLoopback100Hz is the end-to-end figure: a controller
// streams the demo cell (plant on the cell's own model, demo cue, live
// with the planner) to an in-process daemon over real loopback TCP at
// 100 Hz, one tick per benchmark op, so -benchtime 6000x is one minute.
// TAUTLINED_BENCH_SECONDS, if set, fixes the run's length instead. It
// reports, from observation sent to command received: p50, p99 and max in
// µs; the daemon's own solve time (receipt to command ready) p50/p99/max;
// and the process's heap allocations per tick (client and server, gRPC
// included; the daemon's compute path itself allocates nothing, see
// TestLiveTickAllocatesNothing).
func BenchmarkDriveLoopback100Hz(b *testing.B) { benchDrive(b, true, false) }

// BenchmarkDriveLoopback100HzOpenLoop is the same with -no-correction: no
// planner, so it shows what the transport and the estimator cost alone.
func BenchmarkDriveLoopback100HzOpenLoop(b *testing.B) { benchDrive(b, true, true) }

// BenchmarkDriveLoopbackUnpaced is the same exchange back to back, as fast
// as the round trip allows.
func BenchmarkDriveLoopbackUnpaced(b *testing.B) { benchDrive(b, false, false) }

func benchDrive(b *testing.B, paced, openLoop bool) {
	cfg := testConfig(b)
	cfg.NoCorrection = openLoop
	cfg.StallTimeoutS = 5
	if err := cfg.ApplyEnv(os.Getenv); err != nil { // TAUTLINED_* options apply to the benchmark's daemon
		b.Fatal(err)
	}
	h := startTCP(b, cfg)
	h.loadAndArm()
	p := newPlant(b, h.cell)
	c := h.connect(p)
	for i := 0; i < 3; i++ {
		c.step()
	}
	if _, err := h.client.Start(h.ctx(), &pb.StartRequest{CellName: h.cell.Name}); err != nil {
		b.Fatal(err)
	}
	for i := 0; i < 20; i++ { // warm up into live
		c.step()
	}
	ticks := b.N
	if s := os.Getenv("TAUTLINED_BENCH_SECONDS"); s != "" {
		sec, err := strconv.ParseFloat(s, 64)
		if err != nil {
			b.Fatalf("TAUTLINED_BENCH_SECONDS=%q: %v", s, err)
		}
		ticks = int(sec / h.cell.TickS)
	}
	rtt := make([]time.Duration, 0, ticks)
	solve := make([]float64, 0, ticks)
	obs := &pb.Observation{}
	period := time.Duration(h.cell.TickS * float64(time.Second))
	var ms0, ms1 runtime.MemStats
	runtime.ReadMemStats(&ms0)
	b.ResetTimer()
	next := time.Now()
	errors := 0
	for i := 0; i < ticks; i++ {
		if paced {
			next = next.Add(period)
			if d := time.Until(next); d > 0 {
				time.Sleep(d)
			}
		}
		p.fill(obs)
		sent := time.Now()
		if err := c.stream.Send(obs); err != nil {
			b.Fatal(err)
		}
		cmd, err := c.stream.Recv()
		if err != nil {
			b.Fatal(err)
		}
		rtt = append(rtt, time.Since(sent))
		solve = append(solve, float64(cmd.SolveTimeUs))
		c.lc.check(b, "next", cmd.Next.Positions) // every command of the run, against the limits
		if cmd.Error != nil {
			errors++
		}
		// The cue is about 12 s long; play it again from standby so the
		// session stays live for runs of any length.
		if cmd.State == pb.SessionState_SESSION_STATE_STANDBY {
			b.StopTimer()
			p.apply(b, cmd)
			restart(b, h, c)
			b.StartTimer()
			continue
		}
		p.apply(b, cmd)
	}
	b.StopTimer()
	runtime.ReadMemStats(&ms1)
	slices.Sort(rtt)
	slices.Sort(solve)
	q := func(f float64) float64 { return float64(rtt[int(f*float64(len(rtt)-1))].Microseconds()) }
	qs := func(f float64) float64 { return solve[int(f*float64(len(solve)-1))] }
	b.ReportMetric(q(0.5), "p50-µs")
	b.ReportMetric(q(0.99), "p99-µs")
	b.ReportMetric(q(1), "max-µs")
	b.ReportMetric(qs(0.5), "solve-p50-µs")
	b.ReportMetric(qs(0.99), "solve-p99-µs")
	b.ReportMetric(qs(1), "solve-max-µs")
	b.ReportMetric(float64(ms1.Mallocs-ms0.Mallocs)/float64(ticks), "process-allocs/tick")
	b.ReportMetric(float64(errors), "tick-errors")
	c.close()
}

// restart brings the arms back to the cue's first pose in standby and
// starts the cue again.
func restart(b *testing.B, h *harness, c *controller) {
	b.Helper()
	if _, err := h.client.ArmCue(h.ctx(), &pb.ArmCueRequest{CellName: h.cell.Name, CueName: "demo"}); err != nil {
		b.Fatal(err)
	}
	for i := 0; i < 2000; i++ {
		c.step()
		if _, err := h.client.Start(h.ctx(), &pb.StartRequest{CellName: h.cell.Name}); err == nil {
			c.step()
			return
		}
	}
	b.Fatal("the arms never reached the cue's first pose")
}
