package web

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"strings"
	"time"
)

// DefaultAddr is the default listen address: loopback only.
const DefaultAddr = "127.0.0.1:9464"

// Server limits set by NewServer.
const (
	ReadHeaderTimeout = 5 * time.Second
	ReadTimeout       = 10 * time.Second
	// WriteTimeout covers computing the answer: a data-driven model over a
	// long window takes seconds, not minutes.
	WriteTimeout   = 60 * time.Second
	IdleTimeout    = 120 * time.Second
	MaxHeaderBytes = 16 << 10 // request line and headers
	MaxBodyBytes   = 4 << 10  // no endpoint reads a body
)

// NewServer returns a server for h on addr with every timeout and the
// request size limits set. The caller checks addr with CheckListen first.
func NewServer(addr string, h http.Handler) *http.Server {
	return &http.Server{
		Addr:              addr,
		Handler:           http.MaxBytesHandler(h, MaxBodyBytes),
		ReadHeaderTimeout: ReadHeaderTimeout,
		ReadTimeout:       ReadTimeout,
		WriteTimeout:      WriteTimeout,
		IdleTimeout:       IdleTimeout,
		MaxHeaderBytes:    MaxHeaderBytes,
	}
}

// ErrExposed is returned by CheckListen for a non-loopback address without a
// token.
var ErrExposed = errors.New("refusing to serve beyond this machine without a bearer token")

// CheckListen accepts addr (host:port) when its host is loopback
// (127.0.0.0/8, ::1 or localhost), or when a token is set: the HTTP port
// serves everyone's behavioural aggregates, so it is not opened to the
// network unprotected. An empty host (":9464") means every interface.
func CheckListen(addr, token string) error {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return fmt.Errorf("http address %q: %w", addr, err)
	}
	if IsLoopback(host) || token != "" {
		return nil
	}
	return fmt.Errorf("%w: %q is not a loopback address (set a token or listen on 127.0.0.1)", ErrExposed, addr)
}

// IsLoopback reports whether host (no port) names the loopback interface
// without a lookup: localhost, an address in 127.0.0.0/8, or ::1.
func IsLoopback(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(strings.TrimSuffix(strings.TrimPrefix(host, "["), "]"))
	return ip != nil && ip.IsLoopback()
}

// Listen checks addr with CheckListen and listens on it (port 0 picks a free
// port; the listener's Addr says which).
func Listen(ctx context.Context, addr, token string) (net.Listener, error) {
	if err := CheckListen(addr, token); err != nil {
		return nil, err
	}
	var lc net.ListenConfig
	ln, err := lc.Listen(ctx, "tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("http listen: %w", err)
	}
	return ln, nil
}
