package server

import (
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"net"
	"os"
	"strings"
	"sync"
	"time"
)

// TLSFiles names the server's TLS material, all PEM files.
type TLSFiles struct {
	// CertFile and KeyFile are the server's certificate chain and private
	// key. Both or neither; with neither, the server speaks plaintext.
	CertFile, KeyFile string
	// ClientCAFile is the CA bundle client certificates must chain to.
	// When set, clients present certificates (mutual TLS) and the
	// authorisation policy decides by their identity.
	ClientCAFile string
}

// On reports whether TLS is configured.
func (f TLSFiles) On() bool { return f.CertFile != "" || f.KeyFile != "" }

// Mutual reports whether client certificates are verified.
func (f TLSFiles) Mutual() bool { return f.ClientCAFile != "" }

// ServerTLSConfig loads f into a server-side tls.Config: TLS 1.3 only (both
// ends are ours, so nothing older needs serving). With a client CA, a
// client certificate is verified against it if one is presented, and a
// connection whose certificate does not verify is refused during the
// handshake; a connection without one is let through so that the health
// and reflection services stay open, and the authorisation interceptors
// (Authorizer) answer its other calls with Unauthenticated. Never use
// this config with a client CA but without the Authorizer: NewSecurity
// keeps the two together.
//
// The files are read now (an error names the bad one) and read again at
// a handshake after any of them changed (size or modification time), so
// renewed certificates take effect without a restart; if the new files do
// not load (a key not matching its certificate halfway through a copy),
// the last good ones stay in use and reload reports the error (NewSecurity
// logs it). Connections already open keep the certificates they started
// with.
//
// It returns nil, nil when f configures no TLS.
func ServerTLSConfig(f TLSFiles) (*tls.Config, error) {
	r, err := newTLSReloader(f, nil)
	if r == nil || err != nil {
		return nil, err
	}
	return r.serverConfig(), nil
}

// tlsReloader holds the TLS config built from TLSFiles and rebuilds it when
// the files change.
type tlsReloader struct {
	files   TLSFiles
	onError func(error) // a reload failed; nil: ignore

	mu     sync.Mutex
	cfg    *tls.Config
	stamps [3]fileStamp
}

type fileStamp struct {
	size    int64
	modTime time.Time
}

func stampFiles(f TLSFiles) [3]fileStamp {
	var s [3]fileStamp
	for i, p := range []string{f.CertFile, f.KeyFile, f.ClientCAFile} {
		if p == "" {
			continue
		}
		if fi, err := os.Stat(p); err == nil {
			s[i] = fileStamp{fi.Size(), fi.ModTime()}
		}
	}
	return s
}

func newTLSReloader(f TLSFiles, onError func(error)) (*tlsReloader, error) {
	if !f.On() {
		if f.Mutual() {
			return nil, errors.New("-tls-client-ca-file needs -tls-cert-file and -tls-key-file: client certificates are only asked for over TLS")
		}
		return nil, nil
	}
	if f.CertFile == "" || f.KeyFile == "" {
		return nil, errors.New("give -tls-cert-file and -tls-key-file together")
	}
	r := &tlsReloader{files: f, onError: onError, stamps: stampFiles(f)}
	cfg, err := loadTLSFiles(f)
	if err != nil {
		return nil, err
	}
	r.cfg = cfg
	return r, nil
}

// serverConfig is the config to give the server: each handshake gets the
// current one.
func (r *tlsReloader) serverConfig() *tls.Config {
	return &tls.Config{
		MinVersion: tls.VersionTLS13,
		NextProtos: []string{"h2"},
		GetConfigForClient: func(*tls.ClientHelloInfo) (*tls.Config, error) {
			return r.current(), nil
		},
	}
}

// current returns the config for a handshake, reloading the files first if
// they changed since they were last loaded.
func (r *tlsReloader) current() *tls.Config {
	stamps := stampFiles(r.files)
	r.mu.Lock()
	defer r.mu.Unlock()
	if stamps != r.stamps {
		r.stamps = stamps
		cfg, err := loadTLSFiles(r.files)
		if err != nil {
			if r.onError != nil {
				r.onError(err)
			}
		} else {
			r.cfg = cfg
		}
	}
	return r.cfg
}

// loadTLSFiles reads f into a complete server config.
func loadTLSFiles(f TLSFiles) (*tls.Config, error) {
	cert, err := tls.LoadX509KeyPair(f.CertFile, f.KeyFile)
	if err != nil {
		return nil, fmt.Errorf("-tls-cert-file %s / -tls-key-file %s: %w", f.CertFile, f.KeyFile, err)
	}
	cfg := &tls.Config{
		Certificates: []tls.Certificate{cert},
		MinVersion:   tls.VersionTLS13,
		// gRPC clients insist on ALPN "h2"; credentials.NewTLS adds it to
		// the outer config only, so every config a handshake uses says it.
		NextProtos: []string{"h2"},
		ClientAuth: tls.NoClientCert,
	}
	if f.Mutual() {
		pool, err := LoadCertPool(f.ClientCAFile)
		if err != nil {
			return nil, fmt.Errorf("-tls-client-ca-file: %w", err)
		}
		cfg.ClientCAs = pool
		cfg.ClientAuth = tls.VerifyClientCertIfGiven
	}
	return cfg, nil
}

// LoadCertPool reads a PEM bundle of CA certificates. A file without a
// certificate in it is an error naming the file.
func LoadCertPool(path string) (*x509.CertPool, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	pool := x509.NewCertPool()
	if !pool.AppendCertsFromPEM(data) {
		return nil, fmt.Errorf("%s: no PEM certificate in it", path)
	}
	return pool, nil
}

// ErrInsecureListen is returned by CheckListenSecurity for a non-loopback
// address without TLS.
var ErrInsecureListen = errors.New("not a loopback address and no TLS")

// CheckListenSecurity is the rule for the serving address addr
// (host:port): a loopback host (localhost, 127.0.0.0/8, ::1) may be served
// without TLS; any other host, including an empty host or 0.0.0.0 / ::
// (every interface) and any host name other than localhost (names are not
// resolved here, so a name counts as reaching beyond the machine), needs
// TLS unless insecureOK is set. The caller logs a warning when it serves a
// non-loopback address without TLS because insecureOK was set (see
// ListenIsLoopback).
//
// It returns an error wrapping ErrInsecureListen when the rule refuses,
// and one describing the address when addr is not host:port.
func CheckListenSecurity(addr string, tlsOn, insecureOK bool) error {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return fmt.Errorf("listen address %q is not host:port: %w", addr, err)
	}
	if tlsOn || insecureOK || hostIsLoopback(host) {
		return nil
	}
	return fmt.Errorf("%w: %q reaches beyond this machine; give -tls-cert-file and -tls-key-file (and -tls-client-ca-file for client certificates), or -insecure-listen to serve it in plaintext anyway (anyone who reaches the port could command the arms)", ErrInsecureListen, addr)
}

// ListenIsLoopback reports whether addr (host:port) is served on loopback
// only, by CheckListenSecurity's rule.
func ListenIsLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	return err == nil && hostIsLoopback(host)
}

func hostIsLoopback(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
