package client

import (
	"context"
	"errors"
	"fmt"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// The errors the daemon returns, one per gRPC status code it uses. Every
// error a Client method returns for a failed call wraps one of these, so
// callers test with errors.Is(err, client.ErrNotFound) and read the
// daemon's message (which says what to fix) from err.Error().
var (
	// ErrInvalidArgument: a request field is wrong; the message names it.
	ErrInvalidArgument = errors.New("invalid argument")
	// ErrNotFound: an unknown cell or cue.
	ErrNotFound = errors.New("not found")
	// ErrFailedPrecondition: the session's state does not allow the call;
	// the message names the state.
	ErrFailedPrecondition = errors.New("failed precondition")
	// ErrAlreadyExists: a second controller stream on a cell that has one.
	ErrAlreadyExists = errors.New("already exists")
	// ErrUnavailable: the daemon cannot be reached or is shutting down.
	ErrUnavailable = errors.New("daemon unavailable")
	// ErrDeadlineExceeded: the call's deadline passed.
	ErrDeadlineExceeded = errors.New("deadline exceeded")
	// ErrCanceled: the call was canceled.
	ErrCanceled = errors.New("canceled")
	// ErrResourceExhausted: the daemon refused for lack of resources (for
	// example a controller that reads its commands too slowly).
	ErrResourceExhausted = errors.New("resource exhausted")
	// ErrPermissionDenied and ErrUnauthenticated: TLS client certificate
	// problems.
	ErrPermissionDenied = errors.New("permission denied")
	ErrUnauthenticated  = errors.New("unauthenticated")
	// ErrInternal: a daemon bug or an unexpected failure; anything else the
	// daemon returns maps here too.
	ErrInternal = errors.New("daemon internal error")
)

var codeErrors = map[codes.Code]error{
	codes.InvalidArgument:    ErrInvalidArgument,
	codes.OutOfRange:         ErrInvalidArgument,
	codes.NotFound:           ErrNotFound,
	codes.FailedPrecondition: ErrFailedPrecondition,
	codes.AlreadyExists:      ErrAlreadyExists,
	codes.Unavailable:        ErrUnavailable,
	codes.DeadlineExceeded:   ErrDeadlineExceeded,
	codes.Canceled:           ErrCanceled,
	codes.ResourceExhausted:  ErrResourceExhausted,
	codes.PermissionDenied:   ErrPermissionDenied,
	codes.Unauthenticated:    ErrUnauthenticated,
}

// StatusError is a failed call: the gRPC code and the daemon's message.
// It unwraps to the matching Err* value.
type StatusError struct {
	Op      string // the call, e.g. "ArmCue"
	Code    codes.Code
	Message string
	kind    error
}

func (e *StatusError) Error() string {
	return fmt.Sprintf("%s: %s: %s", e.Op, e.kind, e.Message)
}

// Unwrap returns the Err* value of the code.
func (e *StatusError) Unwrap() error { return e.kind }

// GRPCStatus lets status.FromError see the original status.
func (e *StatusError) GRPCStatus() *status.Status { return status.New(e.Code, e.Message) }

// fromRPC turns an error from a gRPC call into a *StatusError (nil and
// io.EOF pass through unchanged). Context errors map to ErrCanceled and
// ErrDeadlineExceeded and keep context.Canceled or
// context.DeadlineExceeded reachable by errors.Is.
func fromRPC(op string, err error) error {
	if err == nil {
		return nil
	}
	var se *StatusError
	if errors.As(err, &se) {
		return err
	}
	switch {
	case errors.Is(err, context.Canceled):
		return &StatusError{Op: op, Code: codes.Canceled, Message: err.Error(), kind: contextKind{ErrCanceled, context.Canceled}}
	case errors.Is(err, context.DeadlineExceeded):
		return &StatusError{Op: op, Code: codes.DeadlineExceeded, Message: err.Error(), kind: contextKind{ErrDeadlineExceeded, context.DeadlineExceeded}}
	}
	st, ok := status.FromError(err)
	if !ok {
		return fmt.Errorf("%s: %w", op, err)
	}
	kind, known := codeErrors[st.Code()]
	if !known {
		kind = ErrInternal
	}
	switch st.Code() {
	case codes.Canceled:
		kind = contextKind{ErrCanceled, context.Canceled}
	case codes.DeadlineExceeded:
		kind = contextKind{ErrDeadlineExceeded, context.DeadlineExceeded}
	}
	return &StatusError{Op: op, Code: st.Code(), Message: st.Message(), kind: kind}
}

// contextKind is an error that is both a client error value and the
// matching context error.
type contextKind struct{ client, ctx error }

func (k contextKind) Error() string   { return k.client.Error() }
func (k contextKind) Unwrap() []error { return []error{k.client, k.ctx} }
