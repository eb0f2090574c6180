// Command tautlined is the tautline daemon: it serves one or more robot
// cells over gRPC (service tautline.v1.CellControl, plus grpc.health.v1 and
// server reflection), corrects their cues against the observed figure and
// records every session.
//
// Options come from, in increasing precedence: the defaults, a JSON config
// file (-config), TAUTLINED_* environment variables, and flags. Run
// tautlined -help for every option.
//
// tautlined is not a safety function: the robot controller's own limits,
// protective stops and safeguarding stay in charge.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"os/signal"
	"syscall"

	"go.uber.org/zap"

	"tautline/server"
)

func main() {
	os.Exit(run(os.Args[1:], os.Getenv, os.Stderr))
}

func newFlagSet(cfg *server.Config, configPath *string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("tautlined", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.StringVar(configPath, "config", "", "JSON config file; its keys are the flag names with '_' for '-', and \"cells\" (a list) for -cell (env TAUTLINED_CONFIG)")
	cfg.BindFlags(fs)
	fs.Usage = func() {
		fmt.Fprintf(stderr, `Usage: tautlined [options]

tautlined serves robot cells to their controllers over gRPC: it corrects each
cue against the observed figure and keeps every command within the joint
limits. Precedence: defaults < -config file < TAUTLINED_* environment < flags.

Options:
`)
		fs.PrintDefaults()
	}
	return fs
}

// loadConfig applies defaults, the config file, the environment and the
// flags, in that order.
func loadConfig(args []string, getenv func(string) string, stderr io.Writer) (server.Config, error) {
	// First pass: find -config (and -help) without applying anything.
	var probe server.Config
	probe = server.DefaultConfig()
	var configPath string
	if err := newFlagSet(&probe, &configPath, stderr).Parse(args); err != nil {
		return server.Config{}, err
	}
	if configPath == "" {
		configPath = getenv("TAUTLINED_CONFIG")
	}
	cfg := server.DefaultConfig()
	if configPath != "" {
		if err := cfg.LoadConfigFile(configPath); err != nil {
			return cfg, err
		}
	}
	if err := cfg.ApplyEnv(getenv); err != nil {
		return cfg, err
	}
	fs := newFlagSet(&cfg, &configPath, io.Discard)
	if err := fs.Parse(args); err != nil {
		return cfg, err
	}
	if fs.NArg() > 0 {
		return cfg, fmt.Errorf("unexpected arguments %q; name cells with -cell", fs.Args())
	}
	return cfg, cfg.Validate()
}

func run(args []string, getenv func(string) string, stderr io.Writer) int {
	cfg, err := loadConfig(args, getenv, stderr)
	if errors.Is(err, flag.ErrHelp) {
		return 0
	}
	if err != nil {
		fmt.Fprintf(stderr, "tautlined: %v\n", err)
		return 2
	}
	log, err := server.NewLogger(cfg.LogFormat, cfg.LogLevel)
	if err != nil {
		fmt.Fprintf(stderr, "tautlined: %v\n", err)
		return 2
	}
	defer log.Sync()

	srv, err := server.New(cfg, log)
	if err != nil {
		log.Error("cannot start", zap.Error(err))
		return 1
	}
	lis, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		log.Error("cannot listen", zap.String("address", cfg.Listen), zap.Error(err))
		return 1
	}
	serveErr := make(chan error, 1)
	go func() { serveErr <- srv.Serve(lis) }()
	var metricsSrv *http.Server
	if cfg.MetricsListen != "" {
		ml, err := net.Listen("tcp", cfg.MetricsListen)
		if err != nil {
			log.Error("cannot listen for metrics", zap.String("address", cfg.MetricsListen), zap.Error(err))
			srv.Shutdown(context.Background())
			<-serveErr
			return 1
		}
		metricsSrv = server.NewMetricsHTTPServer(srv.Metrics())
		log.Info("serving metrics", zap.String("address", ml.Addr().String()), zap.String("path", server.MetricsPath))
		go metricsSrv.Serve(ml)
	}
	if cfg.ProbeListen != "" {
		pl, err := net.Listen("tcp", cfg.ProbeListen)
		if err != nil {
			log.Error("cannot listen for probes", zap.String("address", cfg.ProbeListen), zap.Error(err))
			srv.Shutdown(context.Background())
			<-serveErr
			return 1
		}
		log.Info("serving health in plaintext for probes", zap.String("address", pl.Addr().String()))
		go srv.ServeProbe(pl) // ends with Shutdown
	}

	sig := make(chan os.Signal, 1)
	signal.Notify(sig, syscall.SIGINT, syscall.SIGTERM)
	defer signal.Stop(sig)
	select {
	case err := <-serveErr:
		if err != nil {
			log.Error("serving failed", zap.Error(err))
			return 1
		}
		return 0
	case s := <-sig:
		log.Info("shutting down", zap.String("signal", s.String()))
	}
	ctx, cancel := context.WithTimeout(context.Background(), server.Seconds(cfg.ShutdownGraceS))
	defer cancel()
	code := 0
	if err := srv.Shutdown(ctx); err != nil {
		code = 1
	}
	if metricsSrv != nil {
		metricsSrv.Shutdown(ctx)
	}
	if err := <-serveErr; err != nil {
		log.Error("serving failed", zap.Error(err))
		code = 1
	}
	return code
}
