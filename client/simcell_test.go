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

const demoDir = "../testdata/demo/"

func startTestDaemon(t *testing.T) *Client {
	t.Helper()
	cfg := server.DefaultConfig()
	cfg.Cells = []string{demoDir + "cell.json"}
	cfg.CaptureDir = t.TempDir()
	cfg.PrepareBudgetS = 10 // never cut the planner short: runs repeat exactly
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	cfg.Listen = lis.Addr().String()
	srv, err := server.New(cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	go srv.Serve(lis)
	t.Cleanup(func() { srv.Shutdown(context.Background()) })
	c, err := Dial(cfg.Listen, DialSettings{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

func demoInputs(t *testing.T) (*sim.Cell, *mpc.Cue, []byte) {
	t.Helper()
	cell, err := sim.LoadCell(demoDir+"cell.json", os.ReadFile)
	if err != nil {
		t.Fatal(err)
	}
	csv, err := os.ReadFile(demoDir + "cue.csv")
	if err != nil {
		t.Fatal(err)
	}
	cue, err := mpc.ParseCue("cue.csv", csv, mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
	if err != nil {
		t.Fatal(err)
	}
	return cell, cue, csv
}

// On a perfect plant (no profile) the open-loop run is the reference: the
// plant steps the same model from the same rest pose with the cue's joints
// at the same tick times as mpc.SimulateNominal. What is left is the
// standby ticks at rest before the start, each a Newton solve that stops
// at its tolerance instead of exactly at the rest pose, so the bound is a
// micrometre, not zero.
func TestRunSimCellOpenLoopOnAPerfectPlantIsTheReference(t *testing.T) {
	c := startTestDaemon(t)
	cell, cue, csv := demoInputs(t)
	res, err := RunSimCell(context.Background(), c, SimSettings{Cell: cell, Cue: cue, CueCSV: csv, OpenLoop: true, Fast: true, DurationS: 1})
	if err != nil {
		t.Fatal(err)
	}
	if res.Ticks != 100 || len(res.ErrorM) != 100 || len(res.TimeS) != 100 || len(res.RoundTripS) != 100 {
		t.Fatalf("ticks %d, series %d/%d/%d; want 100 each (1 s at 10 ms)", res.Ticks, len(res.ErrorM), len(res.TimeS), len(res.RoundTripS))
	}
	if res.MaxErrorM > 1e-6 {
		t.Errorf("open loop on a perfect plant: max figure error %v m, want below 1 µm", res.MaxErrorM)
	}
	if got := res.TimeS[99]; got < 1-1e-9 || got > 1+1e-9 {
		t.Errorf("last measured cue time %v s, want 1", got)
	}
	// 3 standby ticks and 100 live ones, each command checked.
	if n := res.Checker.Ticks(); n != 103 {
		t.Errorf("%d commands checked, want 103", n)
	}
}

// A mismatched plant is off the reference from the start: the standard
// profile makes each 0.75 m string 2.5–5% (19–38 mm) longer or shorter,
// so the figure hangs centimetres away from the nominal rest pose. The
// bounds are a sanity range (a quarter of the smallest string change, and
// far more than the largest), not a derived figure.
func TestRunSimCellStandardProfileIsOffTheReference(t *testing.T) {
	c := startTestDaemon(t)
	cell, cue, csv := demoInputs(t)
	data, err := os.ReadFile(demoDir + "standard.mismatch.json")
	if err != nil {
		t.Fatal(err)
	}
	prof, err := sim.ParseMismatch("standard.mismatch.json", data)
	if err != nil {
		t.Fatal(err)
	}
	res, err := RunSimCell(context.Background(), c, SimSettings{Cell: cell, Cue: cue, CueCSV: csv, Profile: prof, OpenLoop: true, Fast: true, DurationS: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	if res.RMSErrorM < 0.25*0.025*0.75 || res.RMSErrorM > 0.2 {
		t.Errorf("open-loop RMS error %v m on the standard profile; want centimetres", res.RMSErrorM)
	}
	if RMS(res.ErrorM) != res.RMSErrorM {
		t.Errorf("RMSErrorM %v is not the RMS of ErrorM %v", res.RMSErrorM, RMS(res.ErrorM))
	}
}
