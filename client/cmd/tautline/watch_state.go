package main

import (
	"strings"

	pb "tautline/proto/tautline/v1"
)

// stateWord is a session state's short lower-case name.
func stateWord(s pb.SessionState) string {
	return strings.ToLower(strings.TrimPrefix(s.String(), "SESSION_STATE_"))
}
