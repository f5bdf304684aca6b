// Package cli holds what every touchledger command shares at its edge: the
// exit-code convention, the duration flag syntax, the NATS connection flags
// (one set for query and ingest) and the version line from the build info.
//
// Exit codes: 0 the command did its job; 1 it failed (data, I/O, network);
// 2 it was called wrongly (unknown or inapplicable flag, bad value): the
// message names the flag.
package cli
