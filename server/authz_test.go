package server

import (
	"context"
	"crypto/tls"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"go.uber.org/zap"
	"go.uber.org/zap/zapcore"
	"go.uber.org/zap/zaptest/observer"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/reflection"
	rpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/grpc/test/bufconn"

	"github.com/prometheus/client_golang/prometheus/testutil"

	pb "tautline/proto/tautline/v1"
)

// unimplementedCell is the generated CellControl service with no method
// implemented: a call that gets past authorisation is answered
// Unimplemented, so that code means "allowed".
type unimplementedCell struct {
	pb.UnimplementedCellControlServer
}

// secureFixture is a gRPC server with the daemon's Security options, the
// CellControl service (unimplemented), health and reflection, on an
// in-memory listener.
type secureFixture struct {
	dir     string // development certificates
	lis     *bufconn.Listener
	logs    *observer.ObservedLogs
	metrics *Metrics
}

func newSecureFixture(t *testing.T, policy AuthzPolicy) *secureFixture {
	t.Helper()
	f := &secureFixture{dir: t.TempDir(), lis: bufconn.Listen(1 << 16), metrics: NewMetrics()}
	if _, err := WriteDevCerts(f.dir, DevCertsOptions{}); err != nil {
		t.Fatal(err)
	}
	core, logs := observer.New(zapcore.InfoLevel)
	f.logs = logs
	sec, err := NewSecurity(SecurityConfig{
		Listen: "0.0.0.0:7461",
		TLS: TLSFiles{
			CertFile:     f.path(DevServerFile),
			KeyFile:      f.path(DevServerKey),
			ClientCAFile: f.path(DevCAFile),
		},
		Authz: policy,
	}, zap.New(core), f.metrics)
	if err != nil {
		t.Fatal(err)
	}
	srv := grpc.NewServer(sec.ServerOptions()...)
	pb.RegisterCellControlServer(srv, unimplementedCell{})
	hs := health.NewServer()
	healthpb.RegisterHealthServer(srv, hs)
	reflection.Register(srv)
	done := make(chan struct{})
	go func() {
		defer close(done)
		_ = srv.Serve(f.lis)
	}()
	t.Cleanup(func() {
		srv.Stop()
		<-done
	})
	return f
}

func (f *secureFixture) path(name string) string { return filepath.Join(f.dir, name) }

// dial connects over TLS trusting caFile, presenting certFile/keyFile
// when given.
func (f *secureFixture) dial(t *testing.T, caFile, certFile, keyFile string) *grpc.ClientConn {
	t.Helper()
	roots, err := LoadCertPool(caFile)
	if err != nil {
		t.Fatal(err)
	}
	cfg := &tls.Config{RootCAs: roots, ServerName: "localhost", MinVersion: tls.VersionTLS13}
	if certFile != "" {
		kp, err := tls.LoadX509KeyPair(certFile, keyFile)
		if err != nil {
			t.Fatal(err)
		}
		cfg.Certificates = []tls.Certificate{kp}
	}
	conn, err := grpc.NewClient("passthrough:///tautlined",
		grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return f.lis.DialContext(ctx) }),
		grpc.WithTransportCredentials(credentials.NewTLS(cfg)))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return conn
}

// callCodes calls every CellControl method once and returns the status
// code each ended with, by method name.
func callCodes(t *testing.T, conn *grpc.ClientConn) map[string]codes.Code {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c := pb.NewCellControlClient(conn)
	got := map[string]codes.Code{}
	unary := func(name string, err error) { got[name] = status.Code(err) }
	_, err := c.LoadCue(ctx, &pb.LoadCueRequest{})
	unary("LoadCue", err)
	_, err = c.ListCues(ctx, &pb.ListCuesRequest{})
	unary("ListCues", err)
	_, err = c.ArmCue(ctx, &pb.ArmCueRequest{})
	unary("ArmCue", err)
	_, err = c.Start(ctx, &pb.StartRequest{})
	unary("Start", err)
	_, err = c.Stop(ctx, &pb.StopRequest{})
	unary("Stop", err)
	_, err = c.ResetFault(ctx, &pb.ResetFaultRequest{})
	unary("ResetFault", err)
	_, err = c.GetStatus(ctx, &pb.GetStatusRequest{})
	unary("GetStatus", err)
	if d, err := c.Drive(ctx); err != nil {
		got["Drive"] = status.Code(err)
	} else {
		_, err = d.Recv()
		got["Drive"] = status.Code(err)
	}
	if w, err := c.WatchStatus(ctx, &pb.WatchStatusRequest{}); err != nil {
		got["WatchStatus"] = status.Code(err)
	} else {
		_, err = w.Recv()
		got["WatchStatus"] = status.Code(err)
	}
	return got
}

func healthCode(t *testing.T, conn *grpc.ClientConn) codes.Code {
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	_, err := healthpb.NewHealthClient(conn).Check(ctx, &healthpb.HealthCheckRequest{})
	return status.Code(err)
}

var (
	controllerMethods = []string{"Drive", "LoadCue", "ArmCue", "Start", "Stop", "ResetFault"}
	watcherMethods    = []string{"GetStatus", "WatchStatus", "ListCues"}
)

func wantCodes(t *testing.T, who string, got map[string]codes.Code, methods []string, want codes.Code) {
	t.Helper()
	for _, m := range methods {
		if got[m] != want {
			t.Errorf("%s calling %s: %v, want %v", who, m, got[m], want)
		}
	}
}

// Every CellControl method has a role, so none is refused by accident
// (or let through: an unlisted method is refused to everyone).
func TestEveryMethodHasARole(t *testing.T) {
	n := 0
	for _, m := range pb.CellControl_ServiceDesc.Methods {
		n++
		if _, ok := MethodRole("/" + pb.CellControl_ServiceDesc.ServiceName + "/" + m.MethodName); !ok {
			t.Errorf("%s has no role", m.MethodName)
		}
	}
	for _, s := range pb.CellControl_ServiceDesc.Streams {
		n++
		if _, ok := MethodRole("/" + pb.CellControl_ServiceDesc.ServiceName + "/" + s.StreamName); !ok {
			t.Errorf("%s has no role", s.StreamName)
		}
	}
	if n != len(controllerMethods)+len(watcherMethods) {
		t.Errorf("CellControl has %d methods; this test knows %d: classify the new ones", n, len(controllerMethods)+len(watcherMethods))
	}
	if r, ok := MethodRole("/tautline.v1.CellControl/NoSuchMethod"); ok {
		t.Errorf("an unknown method has role %v", r)
	}
}

func TestAuthorisationByCertificate(t *testing.T) {
	f := newSecureFixture(t, AuthzPolicy{Controllers: []string{DevControllerIdentity}, Watchers: []string{DevWatcherIdentity}})
	ca := f.path(DevCAFile)

	t.Run("no client certificate", func(t *testing.T) {
		conn := f.dial(t, ca, "", "")
		got := callCodes(t, conn)
		wantCodes(t, "a client without a certificate", got, append(controllerMethods, watcherMethods...), codes.Unauthenticated)
		if c := healthCode(t, conn); c != codes.OK {
			t.Errorf("health without a certificate: %v, want OK (health is open)", c)
		}
		// Reflection is open too.
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		rs, err := rpb.NewServerReflectionClient(conn).ServerReflectionInfo(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if err := rs.Send(&rpb.ServerReflectionRequest{MessageRequest: &rpb.ServerReflectionRequest_ListServices{}}); err != nil {
			t.Fatal(err)
		}
		resp, err := rs.Recv()
		if err != nil {
			t.Fatalf("reflection without a certificate: %v", err)
		}
		found := false
		for _, s := range resp.GetListServicesResponse().GetService() {
			found = found || s.GetName() == ServiceName
		}
		if !found {
			t.Errorf("reflection does not list %s", ServiceName)
		}
		rs.CloseSend()
	})

	t.Run("watcher", func(t *testing.T) {
		got := callCodes(t, f.dial(t, ca, f.path(DevWatchFile), f.path(DevWatchKey)))
		wantCodes(t, "a watcher", got, controllerMethods, codes.PermissionDenied)
		wantCodes(t, "a watcher", got, watcherMethods, codes.Unimplemented)
	})

	t.Run("controller", func(t *testing.T) {
		got := callCodes(t, f.dial(t, ca, f.path(DevControlFile), f.path(DevControlKey)))
		wantCodes(t, "a controller", got, append(controllerMethods, watcherMethods...), codes.Unimplemented)
	})

	t.Run("certificate from another CA", func(t *testing.T) {
		other := t.TempDir()
		if _, err := WriteDevCerts(other, DevCertsOptions{}); err != nil {
			t.Fatal(err)
		}
		// Same identity, wrong issuer: the handshake fails, so no call,
		// not even health, gets through.
		conn := f.dial(t, ca, filepath.Join(other, DevControlFile), filepath.Join(other, DevControlKey))
		if c := healthCode(t, conn); c != codes.Unavailable {
			t.Errorf("health with a certificate from another CA: %v, want Unavailable (handshake refused)", c)
		}
		got := callCodes(t, conn)
		wantCodes(t, "a controller certified by another CA", got, append(controllerMethods, watcherMethods...), codes.Unavailable)
	})

	// Denials are logged with the method and the peer's identity, and counted.
	var watcherDenied, anonDenied bool
	for _, e := range f.logs.FilterMessage("call refused").All() {
		m := e.ContextMap()
		ids, _ := m["identities"].([]interface{})
		if m["method"] == pb.CellControl_Start_FullMethodName && len(ids) == 1 && ids[0] == DevWatcherIdentity && m["code"] == "PermissionDenied" {
			watcherDenied = true
		}
		if m["method"] == pb.CellControl_Drive_FullMethodName && len(ids) == 0 && m["code"] == "Unauthenticated" && m["peer"] != "" {
			anonDenied = true
		}
		if e.Level != zapcore.WarnLevel {
			t.Errorf("denial logged at %v, want warn", e.Level)
		}
	}
	if !watcherDenied || !anonDenied {
		t.Errorf("denial log lines: watcher's Start %v, anonymous Drive %v; logged %v", watcherDenied, anonDenied, f.logs.All())
	}
	if n := testutil.ToFloat64(f.metrics.authzDenials.WithLabelValues("PermissionDenied")); n != float64(len(controllerMethods)) {
		t.Errorf("%v PermissionDenied counted, want %d (the watcher's commands)", n, len(controllerMethods))
	}
	if n := testutil.ToFloat64(f.metrics.authzDenials.WithLabelValues("Unauthenticated")); n != float64(len(controllerMethods)+len(watcherMethods)) {
		t.Errorf("%v Unauthenticated counted, want %d", n, len(controllerMethods)+len(watcherMethods))
	}
}

func TestWatcherListIsSeparate(t *testing.T) {
	// No watchers: a verified certificate that is not a controller may do
	// nothing but health.
	f := newSecureFixture(t, AuthzPolicy{Controllers: []string{DevControllerIdentity}})
	conn := f.dial(t, f.path(DevCAFile), f.path(DevWatchFile), f.path(DevWatchKey))
	wantCodes(t, "an unlisted identity", callCodes(t, conn), append(controllerMethods, watcherMethods...), codes.PermissionDenied)
	if c := healthCode(t, conn); c != codes.OK {
		t.Errorf("health: %v", c)
	}

	// "*": every verified client may watch, still not command.
	f = newSecureFixture(t, AuthzPolicy{Controllers: []string{DevControllerIdentity}, Watchers: []string{AnyVerifiedClient}})
	got := callCodes(t, f.dial(t, f.path(DevCAFile), f.path(DevWatchFile), f.path(DevWatchKey)))
	wantCodes(t, "any verified client", got, watcherMethods, codes.Unimplemented)
	wantCodes(t, "any verified client", got, controllerMethods, codes.PermissionDenied)
	// ... and a client without a certificate still may not.
	wantCodes(t, "no certificate", callCodes(t, f.dial(t, f.path(DevCAFile), "", "")), watcherMethods, codes.Unauthenticated)
}

func TestIdentitiesMatchDNSWithoutCase(t *testing.T) {
	a := NewAuthorizer(AuthzPolicy{Controllers: []string{"Cell-A-Controller.Plant.Example", "spiffe://plant.example/Cell-A"}}, nil, nil)
	for _, c := range []struct {
		ids  []string
		want bool
	}{
		{[]string{"cell-a-controller.plant.example"}, true},
		{[]string{"spiffe://plant.example/Cell-A"}, true},
		{[]string{"spiffe://plant.example/cell-a"}, false}, // URI paths are case-sensitive (RFC 3986 §6.2.2.1)
		{[]string{"cell-b-controller.plant.example"}, false},
		{nil, false},
	} {
		if got := a.holds(c.ids, RoleController); got != c.want {
			t.Errorf("%q as controller: %v, want %v", c.ids, got, c.want)
		}
	}
}

func TestSecurityWithoutTLSAddsNothingAndWarnsBeyondLoopback(t *testing.T) {
	sec, err := NewSecurity(SecurityConfig{Listen: DefaultListen}, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if n := len(sec.ServerOptions()); n != 0 {
		t.Errorf("loopback plaintext: %d server options, want none", n)
	}
	if _, err := NewSecurity(SecurityConfig{Listen: "0.0.0.0:7461"}, nil, nil); err == nil {
		t.Error("plaintext on every interface was accepted")
	}
	core, logs := observer.New(zapcore.InfoLevel)
	if _, err := NewSecurity(SecurityConfig{Listen: "0.0.0.0:7461", InsecureListen: true}, zap.New(core), nil); err != nil {
		t.Fatal(err)
	}
	if w := logs.FilterLevelExact(zapcore.WarnLevel).Len(); w != 1 {
		t.Errorf("%d warnings for an insecure non-loopback listener, want 1: %v", w, logs.All())
	}
}

// Renewed certificate files take effect at the next handshake, without a
// restart; files that do not load leave the last good ones in use.
func TestRenewedCertificatesTakeEffect(t *testing.T) {
	f := newSecureFixture(t, AuthzPolicy{Controllers: []string{DevControllerIdentity}})
	oldCA := filepath.Join(t.TempDir(), "old-ca.pem")
	if err := os.WriteFile(oldCA, readFile(t, f.path(DevCAFile)), 0o644); err != nil {
		t.Fatal(err)
	}
	oldCtl, oldKey := filepath.Join(t.TempDir(), "ctl.pem"), filepath.Join(t.TempDir(), "ctl-key.pem")
	os.WriteFile(oldCtl, readFile(t, f.path(DevControlFile)), 0o644)
	os.WriteFile(oldKey, readFile(t, f.path(DevControlKey)), 0o600)
	if got := callCodes(t, f.dial(t, oldCA, oldCtl, oldKey)); got["Start"] != codes.Unimplemented {
		t.Fatalf("before renewal: Start %v", got["Start"])
	}

	// A whole new CA and certificates, as a renewal from another issuer.
	if _, err := WriteDevCerts(f.dir, DevCertsOptions{Overwrite: true}); err != nil {
		t.Fatal(err)
	}
	future := time.Now().Add(time.Hour)
	for _, n := range []string{DevServerFile, DevServerKey, DevCAFile} {
		if err := os.Chtimes(f.path(n), future, future); err != nil {
			t.Fatal(err)
		}
	}
	if got := callCodes(t, f.dial(t, f.path(DevCAFile), f.path(DevControlFile), f.path(DevControlKey))); got["Start"] != codes.Unimplemented {
		t.Errorf("after renewal, the new controller certificate: Start %v, want Unimplemented (allowed)", got["Start"])
	}
	if c := healthCode(t, f.dial(t, oldCA, oldCtl, oldKey)); c != codes.Unavailable {
		t.Errorf("after renewal, a client trusting only the old CA: health %v, want Unavailable", c)
	}

	// A key that does not match its certificate (a copy half done): the
	// renewed files stay in use and the failure is logged.
	if err := os.WriteFile(f.path(DevServerKey), readFile(t, f.path(DevWatchKey)), 0o600); err != nil {
		t.Fatal(err)
	}
	later := future.Add(time.Hour)
	os.Chtimes(f.path(DevServerKey), later, later)
	if got := callCodes(t, f.dial(t, f.path(DevCAFile), f.path(DevControlFile), f.path(DevControlKey))); got["Start"] != codes.Unimplemented {
		t.Errorf("after a bad key: Start %v, want Unimplemented (the last good files serve)", got["Start"])
	}
	if f.logs.FilterMessage("renewed TLS files do not load; the previous certificates stay in use").Len() == 0 {
		t.Error("the failed reload was not logged")
	}
}
