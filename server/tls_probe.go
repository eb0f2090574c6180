package server

import (
	"errors"
	"net"

	"google.golang.org/grpc"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
)

// DefaultProbeListen is empty: no probe listener unless asked for.
//
// Why a probe listener: with TLS on, the serving port needs a TLS
// handshake, and an orchestrator's built-in gRPC health probe (Kubernetes'
// grpc probe among them) speaks plaintext only. The probe listener serves
// the grpc.health.v1 service alone, in plaintext: it says SERVING or
// NOT_SERVING and nothing else, and no call on it reaches a cell.
const DefaultProbeListen = ""

// ServeProbe serves the health service, and only it, in plaintext on lis
// until Shutdown, reporting the same status as the serving port (NOT_SERVING
// once Shutdown begins). It returns nil after Shutdown.
func (s *Server) ServeProbe(lis net.Listener) error {
	g := grpc.NewServer()
	healthpb.RegisterHealthServer(g, s.health)
	done := make(chan struct{})
	defer close(done)
	go func() {
		select {
		case <-s.quit:
			g.Stop()
		case <-done:
		}
	}()
	err := g.Serve(lis)
	if errors.Is(err, grpc.ErrServerStopped) {
		return nil
	}
	select {
	case <-s.quit:
		return nil // stopped by Shutdown
	default:
	}
	return err
}
