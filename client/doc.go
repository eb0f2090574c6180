// Package client is the Go client of the tautline API and the home of the
// tautline command (client/cmd/tautline): check, sim, replay, fit, report,
// watch and demo.
//
// client imports proto, and sim and mpc for the simulated cell, fitting and
// reports.
package client
