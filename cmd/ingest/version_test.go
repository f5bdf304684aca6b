package main

import (
	"bytes"
	"strings"
	"testing"
)

// TestVersionAndUsageExit: every ingest command prints its version line
// with --version (exit 0) and refuses an unknown flag with exit 2 naming it
// (the exit-code convention of internal/cli).
func TestVersionAndUsageExit(t *testing.T) {
	for _, cmd := range [][]string{nil, {"send"}, {"backup"}, {"restore"}} {
		name := strings.Join(append([]string{"ingest"}, cmd...), " ")
		var out, errOut bytes.Buffer
		if code := run(append(append([]string{}, cmd...), "--version"), &out, &errOut); code != 0 || !strings.HasPrefix(out.String(), name+" ") {
			t.Errorf("%s --version: exit %d, %q %q", name, code, out.String(), errOut.String())
		}
		out.Reset()
		errOut.Reset()
		if code := run(append(append([]string{}, cmd...), "--frobnicate"), &out, &errOut); code != 2 || !strings.Contains(errOut.String(), "frobnicate") {
			t.Errorf("%s --frobnicate: exit %d, stderr %q; want 2 naming the flag", name, code, errOut.String())
		}
	}
	var out, errOut bytes.Buffer
	if code := run([]string{"--maintenance", "1d12h", "--version"}, &out, &errOut); code != 0 {
		t.Errorf("--maintenance 1d12h: exit %d: %s", code, errOut.String())
	}
	if code := run([]string{"--max-age", "7d", "--version"}, &out, &errOut); code != 0 {
		t.Errorf("--max-age 7d (one duration syntax everywhere): exit %d: %s", code, errOut.String())
	}
}
