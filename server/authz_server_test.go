package server

import (
	"context"
	"crypto/tls"
	"net"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"go.uber.org/zap"
	"go.uber.org/zap/zapcore"
	"go.uber.org/zap/zaptest/observer"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/status"
	"google.golang.org/grpc/test/bufconn"

	pb "tautline/proto/tautline/v1"
)

// The daemon itself, configured with mutual TLS and identities, applies
// the policy: a watcher reads the real status but cannot command; a
// controller can.
func TestServerAuthorisesByConfig(t *testing.T) {
	dir := t.TempDir()
	if _, err := WriteDevCerts(dir, DevCertsOptions{}); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig(t)
	cfg.Listen = "0.0.0.0:7461" // allowed: TLS is on
	cfg.TLSCertFile = filepath.Join(dir, DevServerFile)
	cfg.TLSKeyFile = filepath.Join(dir, DevServerKey)
	cfg.TLSClientCAFile = filepath.Join(dir, DevCAFile)
	cfg.ControllerIdentities = []string{DevControllerIdentity}
	cfg.WatcherIdentities = []string{DevWatcherIdentity}
	srv, err := New(cfg, testLogger(t))
	if err != nil {
		t.Fatal(err)
	}
	lis := bufconn.Listen(1 << 20)
	done := make(chan error, 1)
	go func() { done <- srv.Serve(lis) }()
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		srv.Shutdown(ctx)
		<-done
	})
	dial := func(cert, key string) pb.CellControlClient {
		roots, err := LoadCertPool(filepath.Join(dir, DevCAFile))
		if err != nil {
			t.Fatal(err)
		}
		kp, err := tls.LoadX509KeyPair(filepath.Join(dir, cert), filepath.Join(dir, key))
		if err != nil {
			t.Fatal(err)
		}
		conn, err := grpc.NewClient("passthrough:///tautlined",
			grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return lis.DialContext(ctx) }),
			grpc.WithTransportCredentials(credentials.NewTLS(&tls.Config{RootCAs: roots, Certificates: []tls.Certificate{kp}, ServerName: "localhost", MinVersion: tls.VersionTLS13})))
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { conn.Close() })
		return pb.NewCellControlClient(conn)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	cell := srv.CellNames()[0]

	watcher := dial(DevWatchFile, DevWatchKey)
	st, err := watcher.GetStatus(ctx, &pb.GetStatusRequest{CellName: cell})
	if err != nil || st.GetState() != pb.SessionState_SESSION_STATE_IDLE {
		t.Errorf("watcher GetStatus: %v, %v; want the idle cell's status", st, err)
	}
	if _, err := watcher.LoadCue(ctx, &pb.LoadCueRequest{CellName: cell, CueName: "demo", CueCsv: readFile(t, demoCuePath), CueFileName: "cue.csv"}); status.Code(err) != codes.PermissionDenied {
		t.Errorf("watcher LoadCue: %v, want PermissionDenied", err)
	}
	d, err := watcher.Drive(ctx)
	if err == nil {
		_, err = d.Recv()
	}
	if status.Code(err) != codes.PermissionDenied {
		t.Errorf("watcher Drive: %v, want PermissionDenied", err)
	}

	controller := dial(DevControlFile, DevControlKey)
	if _, err := controller.LoadCue(ctx, &pb.LoadCueRequest{CellName: cell, CueName: "demo", CueCsv: readFile(t, demoCuePath), CueFileName: "cue.csv"}); err != nil {
		t.Errorf("controller LoadCue: %v", err)
	}
	cues, err := watcher.ListCues(ctx, &pb.ListCuesRequest{CellName: cell})
	if err != nil || len(cues.GetCues()) != 1 {
		t.Errorf("watcher ListCues after the controller's LoadCue: %v, %v", cues, err)
	}
}

// The daemon refuses a non-loopback address in plaintext, and serves one
// only with -insecure-listen, warning about it.
func TestServerInsecureListenNeedsTheFlagAndWarns(t *testing.T) {
	cfg := testConfig(t)
	cfg.Listen = "0.0.0.0:7461"
	if _, err := New(cfg, nil); err == nil || !strings.Contains(err.Error(), "-insecure-listen") {
		t.Fatalf("plaintext on every interface: %v, want a refusal naming -insecure-listen", err)
	}
	cfg.InsecureListen = true
	core, logs := observer.New(zapcore.WarnLevel)
	srv, err := New(cfg, zap.New(core))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	defer srv.Shutdown(ctx)
	found := false
	for _, e := range logs.All() {
		found = found || (strings.Contains(e.Message, "WITHOUT TLS") && e.ContextMap()["address"] == "0.0.0.0:7461")
	}
	if !found {
		t.Errorf("no warning about serving without TLS; logged %v", logs.All())
	}
}
