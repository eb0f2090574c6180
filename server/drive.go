package server

import (
	"errors"
	"fmt"
	"io"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/peer"
	"google.golang.org/grpc/status"

	pb "tautline/proto/tautline/v1"
)

// handoffWait is the longest the tick path waits, after queueing a
// command, for the sender to hand it to the transport before it runs the
// planner's prepare phase.
const handoffWait = time.Millisecond

// senderExitWait is how long a ending stream waits for its sender to
// finish the command it is sending.
const senderExitWait = 100 * time.Millisecond

// driveStream is one controller stream bound to a cell.
type driveStream struct {
	peer   string
	opened time.Time
}

type received struct {
	obs *pb.Observation
	at  time.Time
	err error
}

// Drive serves one controller stream. Three goroutines share the work: a
// receiver (stream.Recv into a channel), this handler (the tick compute)
// and a sender (stream.Send from a bounded queue). The handler never waits
// for the network: see the package documentation for what a slow reader
// and a stalled writer lead to.
func (s *Server) Drive(stream grpc.BidiStreamingServer[pb.Observation, pb.Command]) error {
	ctx := stream.Context()
	ds := &driveStream{peer: "unknown", opened: time.Now()}
	if p, ok := peer.FromContext(ctx); ok && p.Addr != nil {
		ds.peer = p.Addr.String()
	}

	recvCh := make(chan received, 1)
	done := make(chan struct{})
	defer close(done)
	go func() {
		for {
			obs, err := stream.Recv()
			select {
			case recvCh <- received{obs: obs, at: time.Now(), err: err}:
			case <-done:
				return
			}
			if err != nil {
				return
			}
		}
	}()

	// The first observation binds the stream to its cell.
	var first received
	select {
	case first = <-recvCh:
	case <-ctx.Done():
		return status.FromContextError(ctx.Err()).Err()
	case <-s.quit:
		return status.Error(codes.Unavailable, "tautlined is shutting down")
	}
	if first.err != nil {
		if errors.Is(first.err, io.EOF) {
			return nil
		}
		return first.err
	}
	name := first.obs.GetCellName()
	if name == "" {
		return status.Errorf(codes.InvalidArgument, "cell_name: the first observation of a stream must name its cell (served: %s)", s.cellNames())
	}
	h, err := s.host(name)
	if err != nil {
		return err
	}
	if err := h.attach(ds); err != nil {
		return err
	}

	queue := s.cfg.SendQueueTicks
	sent := make(chan struct{}, 1)
	handoff := time.NewTimer(handoffWait)
	prepareDelay := seconds(s.cfg.PrepareDelayS)
	defer handoff.Stop()
	out := make(chan *commandSlot, queue)
	sendErr := make(chan error, 1)
	senderDone := make(chan struct{})
	go func() {
		defer close(senderDone)
		for slot := range out {
			err := stream.Send(&slot.cmd)
			select {
			case sent <- struct{}{}:
			default:
			}
			if err != nil {
				sendErr <- err
				for range out {
				}
				return
			}
		}
	}()
	defer func() {
		// A sender blocked in Send by a controller that does not read
		// (flow control) only returns once this handler has returned and
		// gRPC ends the stream, so wait for it only briefly.
		close(out)
		select {
		case <-senderDone:
		case <-time.After(senderExitWait):
		}
	}()

	// A slot is refilled only after the sender is done with it: at most
	// queue slots wait in out and one is being sent.
	slots := make([]*commandSlot, queue+2)
	for i := range slots {
		slots[i] = newCommandSlot(h.cell.NumJoints())
	}
	next := 0
	stallTimeout := seconds(s.cfg.StallTimeoutS)
	stall := time.NewTimer(stallTimeout)
	defer stall.Stop()

	r := first
	for {
		if r.err != nil {
			if errors.Is(r.err, io.EOF) {
				h.detach(ds, "the controller closed the stream")
				return nil
			}
			h.detach(ds, "stream broken: "+r.err.Error())
			return r.err
		}
		stall.Reset(stallTimeout)
		slot := slots[next]
		next = (next + 1) % len(slots)
		h.mu.Lock()
		h.eng.tick(r.obs, r.at, slot)
		h.mu.Unlock()
		select { // forget a hand-off signal left from an earlier command
		case <-sent:
		default:
		}
		select {
		case out <- slot:
		default:
			msg := fmt.Sprintf("the controller did not read its commands: %d are waiting (-send-queue-ticks); read one command per observation", queue)
			h.detach(ds, msg)
			return status.Error(codes.ResourceExhausted, msg)
		}
		// Let the command leave before the prepare phase takes this core
		// for a few milliseconds: wait (at most handoffWait) for the sender
		// to hand it to the transport, then Config.PrepareDelayS more for
		// the transport to write it. Measured on the 2-core machine with
		// the controller in the same process: a busy prepare that starts at
		// once delays the command's arrival by about its own length, while
		// an idle pause of the same length delays nothing.
		handoff.Reset(handoffWait)
		select {
		case <-sent:
		case <-handoff.C:
		}
		if prepareDelay > 0 {
			handoff.Reset(prepareDelay)
			<-handoff.C
		}
		h.mu.Lock()
		h.eng.prepareNext()
		h.mu.Unlock()

		select {
		case r = <-recvCh:
		case <-stall.C:
			msg := fmt.Sprintf("no observation for %.3f s (-stall-timeout-s); the stream is ended and the cell goes to %s if it was live",
				s.cfg.StallTimeoutS, s.cfg.OnControllerLoss)
			h.detach(ds, msg)
			return status.Error(codes.DeadlineExceeded, msg)
		case err := <-sendErr:
			h.detach(ds, "sending a command failed: "+err.Error())
			return err
		case <-s.quit:
			h.detach(ds, "tautlined is shutting down")
			return status.Error(codes.Unavailable, "tautlined is shutting down")
		case <-ctx.Done():
			h.detach(ds, "stream cancelled: "+ctx.Err().Error())
			return status.FromContextError(ctx.Err()).Err()
		}
	}
}
