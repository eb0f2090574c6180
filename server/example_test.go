package server_test

import (
	"context"
	"fmt"
	"net"
	"os"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"

	pb "tautline/proto/tautline/v1"
	"tautline/server"
)

// Example starts a daemon in-process on an ephemeral loopback port, reads
// a cell's status over gRPC and shuts the daemon down, as the demo does.
func Example() {
	dir, err := os.MkdirTemp("", "tautlined-example")
	if err != nil {
		panic(err)
	}
	defer os.RemoveAll(dir)

	cfg := server.DefaultConfig()
	cfg.Cells = []string{"../testdata/demo/cell.json"}
	cfg.CaptureDir = dir
	srv, err := server.New(cfg, nil) // nil: no logs
	if err != nil {
		panic(err)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		panic(err)
	}
	served := make(chan error, 1)
	go func() { served <- srv.Serve(lis) }()

	conn, err := grpc.NewClient(lis.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		panic(err)
	}
	st, err := pb.NewCellControlClient(conn).GetStatus(context.Background(), &pb.GetStatusRequest{CellName: "demo-jellyfish"})
	if err != nil {
		panic(err)
	}
	fmt.Println(st.CellName, st.State)
	conn.Close()

	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if err := srv.Shutdown(ctx); err != nil {
		panic(err)
	}
	fmt.Println("serve:", <-served)
	// Output:
	// demo-jellyfish SESSION_STATE_IDLE
	// serve: <nil>
}
