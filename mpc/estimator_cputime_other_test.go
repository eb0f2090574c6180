//go:build !unix

package mpc

// processCPUSeconds is not measured on this platform; the metric reads 0.
func processCPUSeconds() float64 { return 0 }
