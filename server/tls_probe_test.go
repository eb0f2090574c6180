package server

import (
	"context"
	"net"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/status"

	pb "tautline/proto/tautline/v1"
)

// The probe listener answers health in plaintext, serves nothing else, and
// stops with Shutdown.
func TestProbeListenerServesHealthOnly(t *testing.T) {
	srv, err := New(testConfig(t), testLogger(t))
	if err != nil {
		t.Fatal(err)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- srv.ServeProbe(lis) }()
	conn, err := grpc.NewClient(lis.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	for _, svc := range []string{"", ServiceName} {
		resp, err := healthpb.NewHealthClient(conn).Check(ctx, &healthpb.HealthCheckRequest{Service: svc})
		if err != nil || resp.GetStatus() != healthpb.HealthCheckResponse_SERVING {
			t.Errorf("health %q on the probe port: %v, %v", svc, resp, err)
		}
	}
	_, err = pb.NewCellControlClient(conn).GetStatus(ctx, &pb.GetStatusRequest{})
	if status.Code(err) != codes.Unimplemented {
		t.Errorf("CellControl on the probe port: %v, want Unimplemented (not served there)", err)
	}
	if err := srv.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	select {
	case err := <-done:
		if err != nil {
			t.Errorf("ServeProbe: %v", err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("ServeProbe did not return after Shutdown")
	}
}
