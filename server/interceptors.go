package server

import (
	"context"
	"time"

	"go.uber.org/zap"
	"google.golang.org/grpc"
	"google.golang.org/grpc/status"
)

// logUnary logs every unary call with its method, duration and status
// code: at info, at warn when it took longer than Config.SlowCallS.
func (s *Server) logUnary(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
	start := time.Now()
	resp, err := handler(ctx, req)
	s.logCall(info.FullMethod, time.Since(start), err)
	return resp, err
}

// logStream logs every stream when it ends, like logUnary; a stream's
// duration is its lifetime, so it is never called slow.
func (s *Server) logStream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	start := time.Now()
	err := handler(srv, ss)
	d := time.Since(start)
	s.log.Info("stream ended", zap.String("method", info.FullMethod), zap.Duration("duration", d),
		zap.String("code", status.Code(err).String()), zap.Error(err))
	return err
}

func (s *Server) logCall(method string, d time.Duration, err error) {
	fields := []zap.Field{zap.String("method", method), zap.Duration("duration", d), zap.String("code", status.Code(err).String())}
	if err != nil {
		fields = append(fields, zap.Error(err))
	}
	if d > seconds(s.cfg.SlowCallS) {
		s.log.Warn("slow call", fields...)
		return
	}
	s.log.Info("call", fields...)
}
