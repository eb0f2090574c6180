// Package proto holds the tautline wire API and capture records (protobuf
// package tautline.v1) and the Go code generated from them.
//
// Layout:
//
//   - tautline/v1/tick.proto: Observation and Command, the messages of one
//     control tick, and the session states.
//   - tautline/v1/cell_control.proto: the CellControl service (the
//     controller's Drive stream, the operator's calls, WatchStatus).
//   - tautline/v1/capture.proto: Record, the entries of a capture file.
//   - tautline/v1/*.pb.go: generated, committed (Go package tautlinev1).
//   - capture/: the capture file format (writer, reader, repair).
//   - generate.sh: `make proto` regenerates with pinned tools, installing
//     any that are missing; `make proto-check` fails if the committed code
//     differs from what they make.
//
// Units are SI and named in every field (_s, _m, _us, _ns). proto imports
// nothing of the project; server and client import it.
package proto
