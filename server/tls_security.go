package server

import (
	"crypto/tls"
	"errors"
	"fmt"

	"go.uber.org/zap"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
)

// SecurityConfig is the part of the daemon's configuration that decides
// who can reach it and what they may do.
type SecurityConfig struct {
	// Listen is the serving address, host:port.
	Listen string
	// TLS names the server's certificate, key and client CA.
	TLS TLSFiles
	// InsecureListen allows a non-loopback Listen without TLS (logged at
	// warn on every start).
	InsecureListen bool
	// Authz is who may command and who may watch. It needs TLS.ClientCAFile.
	Authz AuthzPolicy
}

// CheckSecurityConfig checks c without reading any file and returns every
// problem at once, each naming its option by flag name:
//   - the listen rule (CheckListenSecurity);
//   - -tls-cert-file and -tls-key-file together;
//   - -tls-client-ca-file only with them;
//   - controller and watcher identities only with a client CA (without
//     client certificates nobody has an identity);
//   - with a client CA, at least one controller identity (else nobody
//     could command the cell).
func CheckSecurityConfig(c SecurityConfig) error {
	var errs []error
	if err := CheckListenSecurity(c.Listen, c.TLS.On(), c.InsecureListen); err != nil {
		errs = append(errs, fmt.Errorf("-listen: %w", err))
	}
	if (c.TLS.CertFile == "") != (c.TLS.KeyFile == "") {
		errs = append(errs, errors.New("-tls-cert-file: give -tls-cert-file and -tls-key-file together"))
	}
	if c.TLS.Mutual() && !c.TLS.On() {
		errs = append(errs, errors.New("-tls-client-ca-file: needs -tls-cert-file and -tls-key-file; client certificates are only asked for over TLS"))
	}
	if !c.TLS.Mutual() && (len(c.Authz.Controllers) > 0 || len(c.Authz.Watchers) > 0) {
		errs = append(errs, errors.New("-controller-identity/-watcher-identity: need -tls-client-ca-file; without client certificates no caller has an identity"))
	}
	if c.TLS.Mutual() && len(c.Authz.Controllers) == 0 {
		errs = append(errs, errors.New("-controller-identity: none given; with client certificates required, name at least one controller identity (a URI or DNS subject alternative name of its certificate), or nobody can command the cell"))
	}
	for _, id := range c.Authz.Controllers {
		if id == "" || id == AnyVerifiedClient {
			errs = append(errs, fmt.Errorf("-controller-identity: %q is not an identity; name each controller's certificate SAN", id))
		}
	}
	return errors.Join(errs...)
}

// Security is the daemon's transport security and authorisation, made
// once from a SecurityConfig and given to grpc.NewServer as ServerOptions.
type Security struct {
	cfg        SecurityConfig
	creds      credentials.TransportCredentials
	authorizer *Authorizer
}

// NewSecurity checks c (CheckSecurityConfig), loads the TLS files, and
// logs what the daemon will accept: a warning for a non-loopback address
// in plaintext (InsecureListen) and for TLS without client certificates
// beyond loopback (anyone who reaches the port may command). log and m may
// be nil.
func NewSecurity(c SecurityConfig, log *zap.Logger, m *Metrics) (*Security, error) {
	if log == nil {
		log = zap.NewNop()
	}
	if err := CheckSecurityConfig(c); err != nil {
		return nil, err
	}
	reloader, err := newTLSReloader(c.TLS, func(err error) {
		log.Error("renewed TLS files do not load; the previous certificates stay in use", zap.Error(err))
	})
	if err != nil {
		return nil, err
	}
	var tcfg *tls.Config
	if reloader != nil {
		tcfg = reloader.serverConfig()
	}
	s := &Security{cfg: c}
	loopback := ListenIsLoopback(c.Listen)
	switch {
	case tcfg == nil && !loopback:
		log.Warn("serving beyond loopback WITHOUT TLS (-insecure-listen): anyone who reaches the port can command the arms",
			zap.String("address", c.Listen))
	case tcfg == nil:
		log.Info("serving on loopback without TLS: every local user can command the arms", zap.String("address", c.Listen))
	case !c.TLS.Mutual() && !loopback:
		log.Warn("TLS without client certificates: anyone who reaches the port can command the arms; give -tls-client-ca-file and -controller-identity",
			zap.String("address", c.Listen))
	}
	if tcfg != nil {
		s.creds = credentials.NewTLS(tcfg)
	}
	if c.TLS.Mutual() {
		s.authorizer = NewAuthorizer(c.Authz, log, m)
		log.Info("client certificates required to command or watch",
			zap.Strings("controllers", c.Authz.Controllers), zap.Strings("watchers", c.Authz.Watchers))
	}
	return s, nil
}

// ServerOptions are the grpc.ServerOptions that apply s: the TLS
// credentials, and with client certificates the authorisation
// interceptors (chained after any interceptors given before them). Give
// all of them to grpc.NewServer; the TLS config without the interceptors
// would let certificate-less clients in.
func (s *Security) ServerOptions() []grpc.ServerOption {
	var opts []grpc.ServerOption
	if s.creds != nil {
		opts = append(opts, grpc.Creds(s.creds))
	}
	if s.authorizer != nil {
		opts = append(opts,
			grpc.ChainUnaryInterceptor(s.authorizer.UnaryInterceptor),
			grpc.ChainStreamInterceptor(s.authorizer.StreamInterceptor))
	}
	return opts
}
