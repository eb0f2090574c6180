package client

import (
	"context"
	"errors"
	"net"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/grpc/test/bufconn"

	pb "tautline/proto/tautline/v1"
)

// refusingDaemon answers every call with the status code it is told to.
type refusingDaemon struct {
	pb.UnimplementedCellControlServer
	code codes.Code
}

func (d *refusingDaemon) ArmCue(context.Context, *pb.ArmCueRequest) (*pb.CellStatus, error) {
	return nil, status.Errorf(d.code, "cue %q: the message that says what to fix", "show")
}

func (d *refusingDaemon) Drive(s grpc.BidiStreamingServer[pb.Observation, pb.Command]) error {
	if _, err := s.Recv(); err != nil {
		return err
	}
	return status.Error(d.code, "cell already has a controller")
}

func startRefusing(t *testing.T, code codes.Code) *Client {
	t.Helper()
	lis := bufconn.Listen(1 << 16)
	srv := grpc.NewServer()
	pb.RegisterCellControlServer(srv, &refusingDaemon{code: code})
	go srv.Serve(lis)
	t.Cleanup(srv.Stop)
	conn, err := grpc.NewClient("passthrough:///bufnet",
		grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return lis.DialContext(ctx) }),
		grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return New(conn)
}

// Each status code the daemon uses comes back as its error value, over a
// real gRPC connection, with the daemon's message kept.
func TestStatusCodesBecomeErrorValues(t *testing.T) {
	want := map[codes.Code]error{
		codes.InvalidArgument:    ErrInvalidArgument,
		codes.NotFound:           ErrNotFound,
		codes.FailedPrecondition: ErrFailedPrecondition,
		codes.AlreadyExists:      ErrAlreadyExists,
		codes.ResourceExhausted:  ErrResourceExhausted,
		codes.Unimplemented:      ErrInternal,
	}
	for code, kind := range want {
		c := startRefusing(t, code)
		_, err := c.ArmCue(context.Background(), "cell", "show")
		if !errors.Is(err, kind) {
			t.Errorf("code %v: got %v, want errors.Is %v", code, err, kind)
			continue
		}
		var se *StatusError
		if !errors.As(err, &se) || se.Code != code || se.Message != `cue "show": the message that says what to fix` || se.Op != "ArmCue" {
			t.Errorf("code %v: StatusError %+v", code, se)
		}
		for other := range want {
			if k := want[other]; other != code && k != kind && errors.Is(err, k) {
				t.Errorf("code %v also matches %v", code, k)
			}
		}
	}
}

func TestDriveRefusalComesBackOnTick(t *testing.T) {
	c := startRefusing(t, codes.AlreadyExists)
	d, err := c.Drive(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	_, err = d.Tick(&pb.Observation{CellName: "cell", TickSeq: 1})
	if !errors.Is(err, ErrAlreadyExists) {
		t.Fatalf("second controller: got %v, want ErrAlreadyExists", err)
	}
}

func TestContextErrorsStayReachable(t *testing.T) {
	c := startRefusing(t, codes.NotFound)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := c.Status(ctx, "cell")
	if !errors.Is(err, ErrCanceled) || !errors.Is(err, context.Canceled) {
		t.Errorf("canceled call: got %v, want ErrCanceled and context.Canceled", err)
	}
}

func TestUnreachableDaemonIsUnavailable(t *testing.T) {
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := lis.Addr().String()
	lis.Close() // nothing listens there now
	c, err := Dial(addr, DialSettings{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	_, err = c.Status(context.Background(), "cell")
	if !errors.Is(err, ErrUnavailable) {
		t.Errorf("closed port: got %v, want ErrUnavailable", err)
	}
	if _, err := Dial("no-port", DialSettings{}); err == nil {
		t.Error("Dial accepted an address without a port")
	}
}
