package server

import (
	"context"
	"errors"
	"fmt"
	"net"
	"os"
	"sort"
	"strings"
	"sync"

	"go.uber.org/zap"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/reflection"
	"google.golang.org/grpc/status"

	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// Server is the tautlined daemon: the CellControl service for every served
// cell, the grpc.health.v1 health service and server reflection, on one
// grpc.Server. Make one with New, run it with Serve, stop it with Shutdown.
type Server struct {
	pb.UnimplementedCellControlServer

	cfg     Config
	log     *zap.Logger
	grpc    *grpc.Server
	health  *health.Server
	cells   map[string]*cellHost
	metrics *Metrics

	quit     chan struct{} // closed by Shutdown: long streams end
	quitOnce sync.Once
}

// ServiceName is the CellControl service's full name, as health checks
// and reflection name it.
const ServiceName = "tautline.v1.CellControl"

// New validates cfg, loads every cell file, and assembles the gRPC server:
// options, chained interceptors (call logging), the CellControl service,
// health (SERVING for "" and ServiceName) and reflection. logger may be
// nil (no logs).
func New(cfg Config, logger *zap.Logger) (*Server, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if logger == nil {
		logger = zap.NewNop()
	}
	s := &Server{cfg: cfg, log: logger, cells: map[string]*cellHost{}, quit: make(chan struct{}), metrics: NewMetrics()}
	for _, path := range cfg.Cells {
		cell, err := sim.LoadCell(path, os.ReadFile)
		if err != nil {
			return nil, err
		}
		if _, dup := s.cells[cell.Name]; dup {
			return nil, fmt.Errorf("%s: cell name %q is already served by another cell file; names must be unique", path, cell.Name)
		}
		h, err := newCellHost(cell, &s.cfg, logger, s.metrics)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", path, err)
		}
		s.cells[cell.Name] = h
		logger.Info("cell loaded", zap.String(fieldCell, cell.Name), zap.String("file", path),
			zap.Int("joints", cell.NumJoints()), zap.Int("markers", len(cell.Markers)), zap.Float64("tick_s", cell.TickS))
	}

	sec, err := NewSecurity(cfg.Security(), logger, s.metrics)
	if err != nil {
		return nil, err
	}
	opts := []grpc.ServerOption{
		grpc.ChainUnaryInterceptor(s.logUnary),
		grpc.ChainStreamInterceptor(s.logStream),
	}
	opts = append(opts, sec.ServerOptions()...) // TLS; authorisation runs inside the call log
	s.grpc = grpc.NewServer(opts...)
	pb.RegisterCellControlServer(s.grpc, s)
	s.health = health.NewServer()
	s.health.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	s.health.SetServingStatus(ServiceName, healthpb.HealthCheckResponse_SERVING)
	healthpb.RegisterHealthServer(s.grpc, s.health)
	reflection.Register(s.grpc)
	return s, nil
}

// Serve serves on lis until Shutdown. It returns nil after Shutdown.
func (s *Server) Serve(lis net.Listener) error {
	s.log.Info("serving", zap.String("address", lis.Addr().String()), zap.Strings("cells", s.CellNames()))
	err := s.grpc.Serve(lis)
	if errors.Is(err, grpc.ErrServerStopped) {
		return nil
	}
	return err
}

// Shutdown stops the server: health goes to NOT_SERVING, controller and
// watch streams are ended (live cells go to Config.OnControllerLoss), a
// graceful stop waits for calls in flight until ctx is done, then the
// server stops hard, and every session's capture is closed with a
// SessionEnd. It returns ctx's error if the graceful stop did not finish.
func (s *Server) Shutdown(ctx context.Context) error {
	s.health.Shutdown()
	s.quitOnce.Do(func() { close(s.quit) })
	stopped := make(chan struct{})
	go func() {
		s.grpc.GracefulStop()
		close(stopped)
	}()
	var err error
	select {
	case <-stopped:
	case <-ctx.Done():
		err = ctx.Err()
		s.log.Warn("graceful stop did not finish in time; stopping hard", zap.Error(err))
		s.grpc.Stop()
		<-stopped
	}
	for _, h := range s.cells {
		h.shutdown("daemon shut down")
	}
	s.log.Info("stopped")
	return err
}

// Metrics returns the daemon's Prometheus metrics; serve them with
// NewMetricsHTTPServer (tautlined does when -metrics-listen is set).
func (s *Server) Metrics() *Metrics { return s.metrics }

// CellNames lists the served cells' names, sorted.
func (s *Server) CellNames() []string {
	names := make([]string, 0, len(s.cells))
	for n := range s.cells {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

func (s *Server) cellNames() string { return strings.Join(s.CellNames(), ", ") }

// host finds a served cell or returns NOT_FOUND naming the served ones.
func (s *Server) host(name string) (*cellHost, error) {
	if name == "" {
		return nil, status.Errorf(codes.InvalidArgument, "cell_name is empty; name one of the served cells: %s", s.cellNames())
	}
	h := s.cells[name]
	if h == nil {
		return nil, status.Errorf(codes.NotFound, "cell %q is not served here; served cells: %s", name, s.cellNames())
	}
	return h, nil
}
