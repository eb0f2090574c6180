// Package server is the tautlined daemon: gRPC services, sessions and their
// state machine, clocks and deadlines, capture recording, logs, metrics,
// health and configuration. It is the shell around the pure core (sim and
// mpc): it owns every socket, file, clock, goroutine and log line.
//
// server imports mpc, sim and proto.
package server
