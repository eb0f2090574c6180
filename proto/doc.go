// Package proto holds the .proto files of the tautline wire API and capture
// records (package tautline.v1) and the Go code generated from them. The
// generated code is committed; `make proto` regenerates it with pinned tools.
//
// proto imports nothing of the project.
package proto
