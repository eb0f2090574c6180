package server

import (
	"testing"

	"go.uber.org/goleak"
)

// Every test in the package runs under the goroutine leak check.
func TestMain(m *testing.M) {
	goleak.VerifyTestMain(m)
}
