package privacy

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestPseudonymHMAC: the pseudonym is HMAC-SHA256 as in RFC 4231 test case 2
// (key "Jefe", data "what do ya want for nothing?"): 5bdcc146bf60754e6a042426
// 089575c75a003f089d2739839dec58b964ec3843. That key is shorter than we
// accept, so the check goes through the same code with the length rule lifted.
func TestPseudonymHMAC(t *testing.T) {
	p := &Pseudonymizer{key: []byte("Jefe"), version: 3, prefix: "p3-"}
	got := p.Pseudonym("what do ya want for nothing?")
	want := "p3-5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843" // RFC 4231 §4.3
	if got != want {
		t.Errorf("pseudonym = %s, want %s", got, want)
	}
	if _, err := New([]byte("short"), 1); err == nil {
		t.Error("short key accepted")
	}
}

func TestLoadKeyFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "key")
	key := strings.Repeat("ab", 32)
	if err := os.WriteFile(path, []byte(key+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadKeyFile(path); err == nil || !strings.Contains(err.Error(), "chmod 600") {
		t.Errorf("world-readable key file accepted: %v", err)
	}
	os.Chmod(path, 0o600)
	k, err := LoadKeyFile(path)
	if err != nil || len(k) != 32 || k[0] != 0xab {
		t.Errorf("key = %x, %v; want 32 bytes of 0xab", k, err)
	}
	if r := string(Redact([]byte(`{"user":"alice"}`))); strings.Contains(r, "alice") || !strings.Contains(r, "sha256") {
		t.Errorf("redaction keeps the text: %s", r)
	}
}
