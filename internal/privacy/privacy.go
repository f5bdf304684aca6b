// Package privacy replaces user ids by keyed pseudonyms before anything is
// stored, logged or published.
//
// Pseudonym(id) = "p" + version + "-" + hex(HMAC-SHA256(key, id)) — the
// version names the key, so after a key rotation old and new pseudonyms can
// be told apart (docs/privacy.md gives the rotation procedure). HMAC-SHA256
// is a keyed pseudorandom function (RFC 2104, FIPS 198-1): without the key
// the pseudonym cannot be recomputed from a guessed id.
package privacy

import (
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"
)

// KeyFileEnv names the environment variable that may give the key file.
const KeyFileEnv = "TOUCHLEDGER_KEY_FILE"

// MinKeyBytes is the shortest key accepted.
const MinKeyBytes = 32

// Pseudonymizer maps user ids to pseudonyms. Safe for concurrent use.
type Pseudonymizer struct {
	key     []byte
	version int
	prefix  string
}

// New returns a pseudonymizer for key (at least MinKeyBytes) and version (>= 1).
func New(key []byte, version int) (*Pseudonymizer, error) {
	if len(key) < MinKeyBytes {
		return nil, fmt.Errorf("privacy: key has %d bytes, want at least %d", len(key), MinKeyBytes)
	}
	if version < 1 {
		return nil, errors.New("privacy: key version must be >= 1")
	}
	return &Pseudonymizer{key: append([]byte(nil), key...), version: version, prefix: "p" + strconv.Itoa(version) + "-"}, nil
}

// LoadKeyFile reads a key file, which must be readable by its owner only
// (no group or other permission bits). Surrounding white space is ignored;
// a key given as 64 or more hex digits is decoded.
func LoadKeyFile(path string) ([]byte, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("privacy: key file: %w", err)
	}
	if st.Mode().Perm()&0o077 != 0 {
		return nil, fmt.Errorf("privacy: key file %s is accessible to group or others (mode %v); chmod 600 it", path, st.Mode().Perm())
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("privacy: key file: %w", err)
	}
	s := strings.TrimSpace(string(b))
	if len(s) >= 2*MinKeyBytes {
		if k, err := hex.DecodeString(s); err == nil {
			return k, nil
		}
	}
	return []byte(s), nil
}

// Pseudonym returns the pseudonym of a user id.
func (p *Pseudonymizer) Pseudonym(id string) string {
	m := hmac.New(sha256.New, p.key)
	m.Write([]byte(id))
	var sum [sha256.Size]byte
	return p.prefix + hex.EncodeToString(m.Sum(sum[:0]))
}

// fingerprintLabel is what Fingerprint authenticates: a fixed label, so
// the fingerprint names the key without being the pseudonym of any id a
// publisher could send.
const fingerprintLabel = "touchledger key fingerprint\x00v1"

// Fingerprint identifies the key: hex of the first 16 bytes of
// HMAC-SHA256(key, fixed label). A data directory records it, so a
// missing or different key is refused (the key cannot be recovered from
// it: HMAC is a pseudorandom function, RFC 2104).
func (p *Pseudonymizer) Fingerprint() string {
	m := hmac.New(sha256.New, p.key)
	m.Write([]byte(fingerprintLabel))
	var sum [sha256.Size]byte
	return hex.EncodeToString(m.Sum(sum[:0])[:16])
}

// Version returns the key version.
func (p *Pseudonymizer) Version() int { return p.version }

// Redact returns what is kept of a rejected payload when ids must not be
// stored in clear: its length and SHA-256, so an operator can find the line
// in the source, never its text.
func Redact(payload []byte) []byte {
	sum := sha256.Sum256(payload)
	return []byte(`{"redacted":true,"length":` + strconv.Itoa(len(payload)) + `,"sha256":"` + hex.EncodeToString(sum[:]) + `"}`)
}
