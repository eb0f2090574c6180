// Package deploy holds what runs tautlined in production, and the tests
// that keep it honest; it has no Go code of its own.
//
//   - systemd/: a sandboxed service unit and its environment file;
//   - container/: a multi-stage container build file (static binaries,
//     non-root, capture directory as a volume);
//   - kubernetes/: one daemon per cell (Deployment with one replica and the
//     Recreate strategy, Service, ConfigMaps for the config and the cell
//     files, Secret for certificates, a volume for captures) and an indexed
//     Job that replays a set of captures as dry-runs.
//
// deploy_test.go reads every file and checks it against the daemon itself:
// flags and arguments are run through the real tautlined and tautline
// binaries, config files and environment files through the daemon's own
// parser and Validate, and ports, paths and the probed health service are
// compared with what the config makes the daemon serve.
package deploy
