package client

import (
	"context"
	"net"
	"os"
	"testing"

	"tautline/mpc"
	"tautline/server"
	"tautline/sim"
)

// BenchmarkSimCellRoundTrip runs the demo cue closed-loop with the
// standard mismatch profile against an in-process daemon over loopback
// gRPC, paced at the tick rate as a cell would, and reports the
// controller's round trip (observation sent to command received) and the
// daemon's own solve time per tick. Quote the machine with the figures.
func BenchmarkSimCellRoundTrip(b *testing.B) {
	const dir = "../testdata/demo/"
	cell, err := sim.LoadCell(dir+"cell.json", os.ReadFile)
	if err != nil {
		b.Fatal(err)
	}
	csv, err := os.ReadFile(dir + "cue.csv")
	if err != nil {
		b.Fatal(err)
	}
	cue, err := mpc.ParseCue("cue.csv", csv, mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
	if err != nil {
		b.Fatal(err)
	}
	pdata, err := os.ReadFile(dir + "standard.mismatch.json")
	if err != nil {
		b.Fatal(err)
	}
	prof, err := sim.ParseMismatch("standard.mismatch.json", pdata)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	var rtt, solve []float64
	for i := 0; i < b.N; i++ {
		cfg := server.DefaultConfig()
		cfg.Cells = []string{dir + "cell.json"}
		cfg.CaptureDir = b.TempDir()
		lis, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			b.Fatal(err)
		}
		cfg.Listen = lis.Addr().String()
		srv, err := server.New(cfg, nil)
		if err != nil {
			b.Fatal(err)
		}
		go srv.Serve(lis)
		c, err := Dial(cfg.Listen, DialSettings{})
		if err != nil {
			b.Fatal(err)
		}
		res, err := RunSimCell(context.Background(), c, SimSettings{Cell: cell, Cue: cue, CueCSV: csv, Profile: prof})
		if err != nil {
			b.Fatal(err)
		}
		c.Close()
		srv.Shutdown(context.Background())
		rtt = append(rtt, res.RoundTripS...)
		for _, us := range res.SolveUs {
			solve = append(solve, float64(us)*1e-6)
		}
	}
	r, s := SpreadOf(rtt, 1e3), SpreadOf(solve, 1e3)
	b.ReportMetric(r.P50, "rtt-p50-ms")
	b.ReportMetric(r.P99, "rtt-p99-ms")
	b.ReportMetric(s.P50, "solve-p50-ms")
	b.ReportMetric(s.P99, "solve-p99-ms")
	b.ReportMetric(float64(len(rtt))/float64(b.N), "ticks/op")
}
