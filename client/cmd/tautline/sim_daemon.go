package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"net"
	"os"
	"time"

	"tautline/client"
	"tautline/server"
)

// daemonFlags are the flags of every subcommand that talks to a daemon:
// its address (or none, to start one in this process) and TLS files.
type daemonFlags struct {
	addr                      string
	caFile, certFile, keyFile string
	captureDir                string
	prepareBudgetS            float64
}

func (d *daemonFlags) bind(fs *flag.FlagSet, inProcessHelp string) {
	fs.StringVar(&d.addr, "addr", "", "daemon address host:port; empty: "+inProcessHelp)
	fs.StringVar(&d.caFile, "tls-ca", "", "CA bundle (PEM) the daemon's certificate must chain to (turns TLS on)")
	fs.StringVar(&d.certFile, "tls-cert", "", "client certificate (PEM) for a daemon that requires one")
	fs.StringVar(&d.keyFile, "tls-key", "", "client private key (PEM)")
	fs.Float64Var(&d.prepareBudgetS, "prepare-budget-s", 0, "an in-process daemon's planner prepare budget per tick, s (0: the daemon's default; a large value makes runs repeat bit for bit)")
	fs.StringVar(&d.captureDir, "daemon-capture-dir", "", "where an in-process daemon writes its own captures (empty: a temporary directory, removed at exit)")
}

// connection is a client to a daemon, and the in-process daemon if one was
// started.
type connection struct {
	*client.Client
	daemon *inProcessDaemon
}

func (c *connection) Close() error {
	err := c.Client.Close()
	if c.daemon != nil {
		err = errors.Join(err, c.daemon.stop())
	}
	return err
}

// connect dials d.addr, or starts a daemon in this process serving cellPath
// and dials it.
func (d *daemonFlags) connect(cellPath string, tweak func(*server.Config)) (*connection, error) {
	if d.addr != "" {
		c, err := client.Dial(d.addr, client.DialSettings{CAFile: d.caFile, CertFile: d.certFile, KeyFile: d.keyFile})
		if err != nil {
			return nil, err
		}
		return &connection{Client: c}, nil
	}
	budget := d.prepareBudgetS
	dm, err := startDaemon(cellPath, d.captureDir, func(cfg *server.Config) {
		if budget > 0 {
			cfg.PrepareBudgetS = budget
		}
		if tweak != nil {
			tweak(cfg)
		}
	})
	if err != nil {
		return nil, err
	}
	c, err := client.Dial(dm.addr, client.DialSettings{})
	if err != nil {
		dm.stop()
		return nil, err
	}
	return &connection{Client: c, daemon: dm}, nil
}

// inProcessDaemon is a tautlined served from this process on an ephemeral
// loopback port.
type inProcessDaemon struct {
	srv     *server.Server
	addr    string
	served  chan error
	tempDir string // removed by stop
}

// startDaemon serves cellPath on 127.0.0.1 at a free port with the default
// configuration (quiet logs) except a 2 s stall timeout, captures in captureDir or a temporary
// directory. tweak, if not nil, edits the configuration first.
// withPrepareBudget sets the daemon's prepare budget when s > 0 (0 keeps
// the daemon's default).
func withPrepareBudget(s float64) func(*server.Config) {
	return func(cfg *server.Config) {
		if s > 0 {
			cfg.PrepareBudgetS = s
		}
	}
}

func startDaemon(cellPath, captureDir string, tweak func(*server.Config)) (*inProcessDaemon, error) {
	cfg := server.DefaultConfig()
	cfg.Cells = []string{cellPath}
	dm := &inProcessDaemon{served: make(chan error, 1)}
	if captureDir == "" {
		dir, err := os.MkdirTemp("", "tautline-daemon-")
		if err != nil {
			return nil, err
		}
		dm.tempDir, captureDir = dir, dir
	}
	cfg.CaptureDir = captureDir
	// The simulated plant shares this process and its CPUs with the
	// daemon, so a plant step slowed by a busy machine must not read as a
	// stalled controller (the default 0.25 s is meant for a real cell).
	cfg.StallTimeoutS = 2
	if tweak != nil {
		tweak(&cfg)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		dm.cleanup()
		return nil, fmt.Errorf("in-process daemon: %w", err)
	}
	cfg.Listen = lis.Addr().String()
	srv, err := server.New(cfg, nil)
	if err != nil {
		lis.Close()
		dm.cleanup()
		return nil, fmt.Errorf("in-process daemon: %w", err)
	}
	dm.srv, dm.addr = srv, cfg.Listen
	go func() { dm.served <- srv.Serve(lis) }()
	return dm, nil
}

func (dm *inProcessDaemon) cleanup() {
	if dm.tempDir != "" {
		os.RemoveAll(dm.tempDir)
	}
}

func (dm *inProcessDaemon) stop() error {
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	err := dm.srv.Shutdown(ctx)
	err = errors.Join(err, <-dm.served)
	dm.cleanup()
	return err
}
