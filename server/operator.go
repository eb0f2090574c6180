package server

import (
	"context"
	"math"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"

	pb "tautline/proto/tautline/v1"
)

// LoadCue checks a cue against its cell (every joint limit on the
// interpolated schedule) and stores it; the reference is the given file or
// the cue simulated on the cell's model.
func (s *Server) LoadCue(ctx context.Context, req *pb.LoadCueRequest) (*pb.CueInfo, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	if req.GetCueName() == "" {
		return nil, status.Error(codes.InvalidArgument, "cue_name is empty; name the cue")
	}
	if len(req.GetCueCsv()) == 0 {
		return nil, status.Error(codes.InvalidArgument, "cue_csv is empty; send the cue file's contents")
	}
	lc, err := loadCue(h.cell, req)
	if err != nil {
		return nil, status.Errorf(codes.InvalidArgument, "cue %q for cell %q: %v", req.GetCueName(), h.cell.Name, err)
	}
	if err := h.storeCue(lc); err != nil {
		return nil, err
	}
	return lc.info, nil
}

// ListCues lists a cell's loaded cues by name.
func (s *Server) ListCues(ctx context.Context, req *pb.ListCuesRequest) (*pb.ListCuesResponse, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	return &pb.ListCuesResponse{Cues: h.listCues()}, nil
}

// ArmCue starts a session with a loaded cue: standby, arms moving to its
// first pose.
func (s *Server) ArmCue(ctx context.Context, req *pb.ArmCueRequest) (*pb.CellStatus, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	if req.GetCueName() == "" {
		return nil, status.Error(codes.InvalidArgument, "cue_name is empty; name a loaded cue")
	}
	return h.arm(req.GetCueName())
}

// Start plays the armed cue: live from the next observation.
func (s *Server) Start(ctx context.Context, req *pb.StartRequest) (*pb.CellStatus, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	return h.start()
}

// Stop brings the arms to rest within limits: hold.
func (s *Server) Stop(ctx context.Context, req *pb.StopRequest) (*pb.CellStatus, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	return h.stop(req.GetReason())
}

// ResetFault clears a fault: idle, session ended.
func (s *Server) ResetFault(ctx context.Context, req *pb.ResetFaultRequest) (*pb.CellStatus, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	return h.resetFault(req.GetReason())
}

// GetStatus reads a cell's status.
func (s *Server) GetStatus(ctx context.Context, req *pb.GetStatusRequest) (*pb.CellStatus, error) {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return nil, err
	}
	return h.status(), nil
}

// WatchStatus sends the status now, at once on every state change, and,
// while other fields change, at most every min_interval_s.
func (s *Server) WatchStatus(req *pb.WatchStatusRequest, stream grpc.ServerStreamingServer[pb.CellStatus]) error {
	h, err := s.host(req.GetCellName())
	if err != nil {
		return err
	}
	iv := req.GetMinIntervalS()
	if math.IsNaN(iv) || iv < 0 || math.IsInf(iv, 0) {
		return status.Errorf(codes.InvalidArgument, "min_interval_s is %v; want 0 (the daemon's default) or a positive number of seconds", iv)
	}
	if iv == 0 {
		iv = s.cfg.WatchMinIntervalS
	}
	interval := max(seconds(iv), time.Millisecond)
	st, changed := h.watch()
	if err := stream.Send(st); err != nil {
		return err
	}
	last := st
	ticker := time.NewTicker(interval)
	defer ticker.Stop()
	ctx := stream.Context()
	for {
		select {
		case <-changed:
		case <-ticker.C:
		case <-ctx.Done():
			return nil
		case <-s.quit:
			return status.Error(codes.Unavailable, "tautlined is shutting down")
		}
		st, changed = h.watch()
		if proto.Equal(st, last) {
			continue
		}
		if err := stream.Send(st); err != nil {
			return err
		}
		last = st
	}
}
