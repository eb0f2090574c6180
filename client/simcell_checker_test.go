package client

import (
	"context"
	"errors"
	"io"
	"net"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/test/bufconn"

	pb "tautline/proto/tautline/v1"
)

// jumpyDaemon is a fake daemon that answers every observation with the
// measured joints, except that on tick jumpAt it moves joint 0 by jumpRad
// at once: a guard bug the simulated cell's independent check must see.
type jumpyDaemon struct {
	pb.UnimplementedCellControlServer
	jumpAt  uint64
	jumpRad float64
}

func (d *jumpyDaemon) LoadCue(context.Context, *pb.LoadCueRequest) (*pb.CueInfo, error) {
	return &pb.CueInfo{}, nil
}
func (d *jumpyDaemon) ArmCue(context.Context, *pb.ArmCueRequest) (*pb.CellStatus, error) {
	return &pb.CellStatus{}, nil
}
func (d *jumpyDaemon) Start(context.Context, *pb.StartRequest) (*pb.CellStatus, error) {
	return &pb.CellStatus{}, nil
}
func (d *jumpyDaemon) Stop(context.Context, *pb.StopRequest) (*pb.CellStatus, error) {
	return &pb.CellStatus{}, nil
}

func (d *jumpyDaemon) Drive(s grpc.BidiStreamingServer[pb.Observation, pb.Command]) error {
	for {
		obs, err := s.Recv()
		if errors.Is(err, io.EOF) {
			return nil
		}
		if err != nil {
			return err
		}
		q := append([]float64(nil), obs.GetMeasuredJointPositions()...)
		if obs.GetTickSeq() == d.jumpAt {
			q[0] += d.jumpRad
		}
		if err := s.Send(&pb.Command{TickSeq: obs.GetTickSeq(), Next: &pb.JointTargets{Positions: q}, State: pb.SessionState_SESSION_STATE_LIVE}); err != nil {
			return err
		}
	}
}

func TestRunSimCellCountsADaemonsViolation(t *testing.T) {
	lis := bufconn.Listen(1 << 20)
	srv := grpc.NewServer()
	// left.j1 of the demo cell: 0.05 rad in one 10 ms tick is 5 rad/s,
	// beyond its velocity limit, and 500 rad/s² from rest, beyond its
	// 3 rad/s² acceleration limit (the fake daemon then holds the new
	// position, a second acceleration violation as the joint stops).
	pb.RegisterCellControlServer(srv, &jumpyDaemon{jumpAt: 10, jumpRad: 0.05})
	go srv.Serve(lis)
	defer srv.Stop()
	conn, err := grpc.NewClient("passthrough:///bufnet",
		grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return lis.DialContext(ctx) }),
		grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	cell, cue, csv := demoInputs(t)
	res, err := RunSimCell(context.Background(), New(conn), SimSettings{Cell: cell, Cue: cue, CueCSV: csv, Fast: true, DurationS: 0.3})
	if err != nil {
		t.Fatal(err)
	}
	c := res.Checker
	if c.Count(LimitVelocity) < 1 || c.Count(LimitAcceleration) < 1 {
		t.Fatalf("a 0.05 rad jump in one tick: velocity %d, acceleration %d violations; want both counted (%v)",
			c.Count(LimitVelocity), c.Count(LimitAcceleration), c.First())
	}
	if v := c.First()[0]; v.Tick != 10 || v.Name != "left.j1" {
		t.Errorf("first violation %v, want tick 10 on left.j1", v)
	}
}
