package server

import (
	"context"
	"crypto/x509"
	"strings"

	"go.uber.org/zap"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/peer"
	"google.golang.org/grpc/status"

	pb "tautline/proto/tautline/v1"
)

// Role is what a call needs its caller to be.
type Role int

const (
	// RoleOpen calls need nothing: health checks and server reflection.
	RoleOpen Role = iota
	// RoleWatcher calls read: status, the status stream, the cue list.
	RoleWatcher
	// RoleController calls command the arms or change what they will
	// play: the controller stream and every cue and state change.
	RoleController
)

func (r Role) String() string {
	switch r {
	case RoleOpen:
		return "open"
	case RoleWatcher:
		return "watcher"
	case RoleController:
		return "controller"
	}
	return "unknown"
}

// methodRoles lists every CellControl method by the role it needs. A
// method missing here is refused to everyone (and a test fails until it is
// listed).
var methodRoles = map[string]Role{
	pb.CellControl_Drive_FullMethodName:       RoleController,
	pb.CellControl_LoadCue_FullMethodName:     RoleController,
	pb.CellControl_ArmCue_FullMethodName:      RoleController,
	pb.CellControl_Start_FullMethodName:       RoleController,
	pb.CellControl_Stop_FullMethodName:        RoleController,
	pb.CellControl_ResetFault_FullMethodName:  RoleController,
	pb.CellControl_GetStatus_FullMethodName:   RoleWatcher,
	pb.CellControl_WatchStatus_FullMethodName: RoleWatcher,
	pb.CellControl_ListCues_FullMethodName:    RoleWatcher,
}

// openServices are the services anyone may call: they report health and
// describe the API, and change nothing.
var openServices = []string{
	"/grpc.health.v1.Health/",
	"/grpc.reflection.v1.ServerReflection/",
	"/grpc.reflection.v1alpha.ServerReflection/",
}

// MethodRole returns the role the method fullMethod ("/package.Service/Method")
// needs, and false for a method it does not know (which is refused).
func MethodRole(fullMethod string) (Role, bool) {
	for _, p := range openServices {
		if strings.HasPrefix(fullMethod, p) {
			return RoleOpen, true
		}
	}
	r, ok := methodRoles[fullMethod]
	return r, ok
}

// AuthzPolicy says who may do what, by client certificate identity.
//
// A client's identities are the subject alternative names of its verified
// leaf certificate: every URI SAN (as written, e.g.
// "spiffe://plant.example/cell-a/controller") and every DNS SAN (compared
// without regard to case, e.g. "cell-a-controller.plant.example"). The
// subject's common name is not used: it is free text, and certificate
// identity moved to the subject alternative name long ago (RFC 6125).
// Ask the site's PKI for client certificates with a SAN naming the client.
type AuthzPolicy struct {
	// Controllers may open the controller stream (Drive), load and arm
	// cues, start, stop and reset faults, and everything watchers may.
	Controllers []string
	// Watchers may read status, watch it and list cues. The single entry
	// "*" lets any client with a verified certificate watch.
	Watchers []string
}

// AnyVerifiedClient, as the only Watchers entry, lets every client whose
// certificate verifies watch.
const AnyVerifiedClient = "*"

// Authorizer enforces an AuthzPolicy in gRPC interceptors. Health and
// reflection are open; every other call needs a verified client
// certificate (Unauthenticated without one) whose identity holds the
// call's role (PermissionDenied otherwise). Each denial is logged at warn
// with the method and the peer's address and identities, and counted in
// the metrics.
type Authorizer struct {
	controllers map[string]bool
	watchers    map[string]bool
	anyWatcher  bool
	log         *zap.Logger
	metrics     *Metrics
}

// NewAuthorizer returns an Authorizer for p. log and m may be nil.
func NewAuthorizer(p AuthzPolicy, log *zap.Logger, m *Metrics) *Authorizer {
	if log == nil {
		log = zap.NewNop()
	}
	a := &Authorizer{controllers: map[string]bool{}, watchers: map[string]bool{}, log: log, metrics: m}
	for _, id := range p.Controllers {
		a.controllers[normaliseIdentity(id)] = true
	}
	for _, id := range p.Watchers {
		if id == AnyVerifiedClient {
			a.anyWatcher = true
			continue
		}
		a.watchers[normaliseIdentity(id)] = true
	}
	return a
}

// normaliseIdentity lower-cases DNS names (case does not matter in them)
// and leaves URIs as written.
func normaliseIdentity(id string) string {
	if strings.Contains(id, ":") {
		return id
	}
	return strings.ToLower(id)
}

// CertIdentities lists a certificate's identities in AuthzPolicy's sense:
// URI SANs, then DNS SANs (lower case).
func CertIdentities(c *x509.Certificate) []string {
	ids := make([]string, 0, len(c.URIs)+len(c.DNSNames))
	for _, u := range c.URIs {
		ids = append(ids, u.String())
	}
	for _, d := range c.DNSNames {
		ids = append(ids, strings.ToLower(d))
	}
	return ids
}

// peerCert returns the caller's verified leaf certificate, or nil when the
// connection is not TLS or the client presented none. Only a certificate
// that chained to the client CA counts: unverified peer certificates are
// never trusted.
func peerCert(ctx context.Context) (*x509.Certificate, string) {
	p, ok := peer.FromContext(ctx)
	if !ok {
		return nil, ""
	}
	addr := ""
	if p.Addr != nil {
		addr = p.Addr.String()
	}
	info, ok := p.AuthInfo.(credentials.TLSInfo)
	if !ok || len(info.State.VerifiedChains) == 0 || len(info.State.VerifiedChains[0]) == 0 {
		return nil, addr
	}
	return info.State.VerifiedChains[0][0], addr
}

// Authorize decides one call to fullMethod by the caller in ctx: nil, or a
// gRPC status error (Unauthenticated or PermissionDenied) saying what is
// missing. Denials are logged and counted.
func (a *Authorizer) Authorize(ctx context.Context, fullMethod string) error {
	role, known := MethodRole(fullMethod)
	if known && role == RoleOpen {
		return nil
	}
	cert, addr := peerCert(ctx)
	if cert == nil {
		return a.deny(codes.Unauthenticated, fullMethod, addr, nil,
			"%s needs a client certificate issued by the daemon's client CA; none was presented", fullMethod)
	}
	ids := CertIdentities(cert)
	if !known {
		return a.deny(codes.PermissionDenied, fullMethod, addr, ids, "%s is not a method this daemon authorises", fullMethod)
	}
	if a.holds(ids, role) {
		return nil
	}
	return a.deny(codes.PermissionDenied, fullMethod, addr, ids,
		"%s needs the %s role; certificate identities %q are not on the daemon's %s list", fullMethod, role, ids, role)
}

func (a *Authorizer) holds(ids []string, role Role) bool {
	if role == RoleWatcher && a.anyWatcher {
		return true
	}
	for _, id := range ids {
		id = normaliseIdentity(id)
		if a.controllers[id] || (role == RoleWatcher && a.watchers[id]) {
			return true
		}
	}
	return false
}

func (a *Authorizer) deny(code codes.Code, method, addr string, ids []string, format string, args ...any) error {
	a.log.Warn("call refused", zap.String("method", method), zap.String("peer", addr),
		zap.Strings("identities", ids), zap.String("code", code.String()))
	a.metrics.AuthzDenied(code.String())
	return status.Errorf(code, format, args...)
}

// UnaryInterceptor authorises unary calls.
func (a *Authorizer) UnaryInterceptor(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
	if err := a.Authorize(ctx, info.FullMethod); err != nil {
		return nil, err
	}
	return handler(ctx, req)
}

// StreamInterceptor authorises streams before the handler sees them.
func (a *Authorizer) StreamInterceptor(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	if err := a.Authorize(ss.Context(), info.FullMethod); err != nil {
		return err
	}
	return handler(srv, ss)
}
