// Package tautlinev1 is the Go code generated from the tautline.v1 protobuf
// package: the tick messages (tick.proto), the CellControl service
// (cell_control.proto) and the capture records (capture.proto).
//
// Everything but this file is generated; edit the .proto files and run
// `make proto`. Units are SI and named in every field (_s, _m, _us, _ns);
// joint values are rad (revolute) or m (prismatic) in the cell's joint
// order.
package tautlinev1
