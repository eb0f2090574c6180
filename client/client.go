package client

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"io"
	"net"
	"os"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"

	pb "tautline/proto/tautline/v1"
)

// DialSettings says how to reach a daemon. The zero value means a
// plaintext connection, which the daemon accepts on loopback only.
type DialSettings struct {
	// CAFile is the CA bundle (PEM) the daemon's certificate must chain
	// to; setting it turns TLS on.
	CAFile string
	// CertFile and KeyFile are this client's certificate and key (PEM), for
	// a daemon that requires client certificates.
	CertFile, KeyFile string
	// ServerName overrides the name checked in the daemon's certificate.
	ServerName string
}

// Client is a typed client of the tautline CellControl API. Every failed
// call returns an error wrapping one of the Err* values.
type Client struct {
	conn *grpc.ClientConn // nil when built by New
	rpc  pb.CellControlClient
}

// Dial connects to the daemon at addr (host:port). The connection is made
// lazily: an unreachable daemon shows as ErrUnavailable on the first call.
func Dial(addr string, s DialSettings) (*Client, error) {
	if _, _, err := net.SplitHostPort(addr); err != nil {
		return nil, fmt.Errorf("daemon address %q: want host:port (%v)", addr, err)
	}
	creds := insecure.NewCredentials()
	if s.CAFile != "" || s.CertFile != "" || s.KeyFile != "" {
		tc, err := tlsConfig(s)
		if err != nil {
			return nil, err
		}
		creds = credentials.NewTLS(tc)
	}
	conn, err := grpc.NewClient(addr, grpc.WithTransportCredentials(creds))
	if err != nil {
		return nil, fmt.Errorf("daemon address %q: %w", addr, err)
	}
	return &Client{conn: conn, rpc: pb.NewCellControlClient(conn)}, nil
}

func tlsConfig(s DialSettings) (*tls.Config, error) {
	tc := &tls.Config{MinVersion: tls.VersionTLS12, ServerName: s.ServerName}
	if s.CAFile != "" {
		pem, err := os.ReadFile(s.CAFile)
		if err != nil {
			return nil, fmt.Errorf("TLS CA file: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("TLS CA file %s: no PEM certificate in it", s.CAFile)
		}
		tc.RootCAs = pool
	}
	if (s.CertFile == "") != (s.KeyFile == "") {
		return nil, errors.New("TLS: give both a client certificate file and its key file, or neither")
	}
	if s.CertFile != "" {
		cert, err := tls.LoadX509KeyPair(s.CertFile, s.KeyFile)
		if err != nil {
			return nil, fmt.Errorf("TLS client certificate: %w", err)
		}
		tc.Certificates = []tls.Certificate{cert}
	}
	return tc, nil
}

// New wraps an existing connection (for example an in-memory one in
// tests). Close does not close it.
func New(conn grpc.ClientConnInterface) *Client {
	return &Client{rpc: pb.NewCellControlClient(conn)}
}

// Close closes the connection Dial made.
func (c *Client) Close() error {
	if c.conn == nil {
		return nil
	}
	return c.conn.Close()
}

// CueFile is a cue to load: its name, its CSV bytes and, optionally, a
// reference CSV. File names are quoted in the daemon's error messages.
type CueFile struct {
	CellName, CueName string
	CSV               []byte
	FileName          string
	ReferenceCSV      []byte
	ReferenceFileName string
}

// LoadCue stores a cue for a cell; the daemon checks every limit.
func (c *Client) LoadCue(ctx context.Context, f CueFile) (*pb.CueInfo, error) {
	info, err := c.rpc.LoadCue(ctx, &pb.LoadCueRequest{
		CellName: f.CellName, CueName: f.CueName, CueCsv: f.CSV, CueFileName: f.FileName,
		ReferenceCsv: f.ReferenceCSV, ReferenceFileName: f.ReferenceFileName,
	})
	return info, fromRPC("LoadCue", err)
}

// ListCues lists the cues loaded for a cell.
func (c *Client) ListCues(ctx context.Context, cell string) ([]*pb.CueInfo, error) {
	r, err := c.rpc.ListCues(ctx, &pb.ListCuesRequest{CellName: cell})
	if err != nil {
		return nil, fromRPC("ListCues", err)
	}
	return r.GetCues(), nil
}

// ArmCue selects a loaded cue; the cell goes to standby.
func (c *Client) ArmCue(ctx context.Context, cell, cue string) (*pb.CellStatus, error) {
	st, err := c.rpc.ArmCue(ctx, &pb.ArmCueRequest{CellName: cell, CueName: cue})
	return st, fromRPC("ArmCue", err)
}

// Start plays the armed cue; the cell goes live.
func (c *Client) Start(ctx context.Context, cell string) (*pb.CellStatus, error) {
	st, err := c.rpc.Start(ctx, &pb.StartRequest{CellName: cell})
	return st, fromRPC("Start", err)
}

// Stop brings the arms to rest; the cell goes to hold.
func (c *Client) Stop(ctx context.Context, cell, reason string) (*pb.CellStatus, error) {
	st, err := c.rpc.Stop(ctx, &pb.StopRequest{CellName: cell, Reason: reason})
	return st, fromRPC("Stop", err)
}

// ResetFault clears a fault; the cell goes to idle.
func (c *Client) ResetFault(ctx context.Context, cell, reason string) (*pb.CellStatus, error) {
	st, err := c.rpc.ResetFault(ctx, &pb.ResetFaultRequest{CellName: cell, Reason: reason})
	return st, fromRPC("ResetFault", err)
}

// Status reads a cell's status once.
func (c *Client) Status(ctx context.Context, cell string) (*pb.CellStatus, error) {
	st, err := c.rpc.GetStatus(ctx, &pb.GetStatusRequest{CellName: cell})
	return st, fromRPC("GetStatus", err)
}

// StatusWatch is an open WatchStatus stream.
type StatusWatch struct {
	s grpc.ServerStreamingClient[pb.CellStatus]
}

// WatchStatus opens a status stream for a cell; minIntervalS zero means
// the daemon's default.
func (c *Client) WatchStatus(ctx context.Context, cell string, minIntervalS float64) (*StatusWatch, error) {
	s, err := c.rpc.WatchStatus(ctx, &pb.WatchStatusRequest{CellName: cell, MinIntervalS: minIntervalS})
	if err != nil {
		return nil, fromRPC("WatchStatus", err)
	}
	return &StatusWatch{s: s}, nil
}

// Next waits for the next status; io.EOF when the daemon ends the stream.
func (w *StatusWatch) Next() (*pb.CellStatus, error) {
	st, err := w.s.Recv()
	if errors.Is(err, io.EOF) {
		return nil, io.EOF
	}
	return st, fromRPC("WatchStatus", err)
}

// Drive is an open controller stream: one Command per Observation, in
// order. Its methods must not be called concurrently with each other.
type Drive struct {
	s grpc.BidiStreamingClient[pb.Observation, pb.Command]
}

// Drive opens the controller stream. The first observation must name the
// cell; a cell that already has a controller refuses with
// ErrAlreadyExists (on the first Tick).
func (c *Client) Drive(ctx context.Context) (*Drive, error) {
	s, err := c.rpc.Drive(ctx)
	if err != nil {
		return nil, fromRPC("Drive", err)
	}
	return &Drive{s: s}, nil
}

// Send sends one observation.
func (d *Drive) Send(obs *pb.Observation) error {
	err := d.s.Send(obs)
	if errors.Is(err, io.EOF) {
		// The stream ended; the real reason comes from Recv.
		_, rerr := d.s.Recv()
		if rerr != nil && !errors.Is(rerr, io.EOF) {
			return fromRPC("Drive", rerr)
		}
		return fmt.Errorf("Drive: %w: the daemon closed the stream", ErrUnavailable)
	}
	return fromRPC("Drive", err)
}

// Recv waits for the next command.
func (d *Drive) Recv() (*pb.Command, error) {
	cmd, err := d.s.Recv()
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("Drive: %w: the daemon closed the stream", ErrUnavailable)
	}
	return cmd, fromRPC("Drive", err)
}

// Tick sends obs and waits for its command.
func (d *Drive) Tick(obs *pb.Observation) (*pb.Command, error) {
	if err := d.Send(obs); err != nil {
		return nil, err
	}
	return d.Recv()
}

// CloseSend ends the controller's side of the stream and waits for the
// daemon to end its side.
func (d *Drive) CloseSend() error {
	if err := d.s.CloseSend(); err != nil {
		return fromRPC("Drive", err)
	}
	for {
		_, err := d.s.Recv()
		if errors.Is(err, io.EOF) {
			return nil
		}
		if err != nil {
			return fromRPC("Drive", err)
		}
	}
}
