//go:build !unix

package sim

// benchCPUSeconds is not measured on this platform.
func benchCPUSeconds() float64 { return 0 }
