package server

import (
	"fmt"

	"go.uber.org/zap"
	"go.uber.org/zap/zapcore"
)

// NewLogger builds the daemon's logger: format "json" (one JSON object per
// line, for collectors) or "console" (for people), at level debug, info,
// warn or error. Timestamps are ISO 8601 in both formats.
func NewLogger(format, level string) (*zap.Logger, error) {
	lvl, err := zapcore.ParseLevel(level)
	if err != nil {
		return nil, fmt.Errorf("log level %q: want debug, info, warn or error", level)
	}
	var cfg zap.Config
	switch format {
	case "json":
		cfg = zap.NewProductionConfig()
		cfg.Sampling = nil // per-tick debug lines are sampled by the session itself
	case "console":
		cfg = zap.NewDevelopmentConfig()
		cfg.Development = false
	default:
		return nil, fmt.Errorf("log format %q: want json or console", format)
	}
	cfg.Level = zap.NewAtomicLevelAt(lvl)
	cfg.EncoderConfig.EncodeTime = zapcore.ISO8601TimeEncoder
	cfg.DisableStacktrace = true
	return cfg.Build()
}

// Log field names shared by every line about a cell.
const (
	fieldCell    = "cell"
	fieldSession = "session"
	fieldTick    = "tick"
	fieldState   = "state"
	fieldReason  = "reason"
)
