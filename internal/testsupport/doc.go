// Package testsupport holds what several packages' tests need, once: an
// embedded NATS server on a random loopback port, the small fixed-seed demo
// world, a store filled by replaying it, its split by partition, and JSON
// comparison within float tolerance. Only tests import it.
package testsupport
