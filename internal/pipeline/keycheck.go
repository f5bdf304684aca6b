package pipeline

import (
	"context"
	"errors"
	"fmt"
	"strconv"

	"github.com/touchledger/touchledger/internal/privacy"
	"github.com/touchledger/touchledger/internal/state"
)

// ErrKeyMismatch is returned by CheckKey (and New) when the configured
// pseudonymisation key is not the one the data directory was written
// with: none where one was used, another one of the same version, or one
// where raw ids were stored.
var ErrKeyMismatch = errors.New("pipeline: pseudonymisation key does not match the data directory")

// Key fingerprints are kept as meta entries: metaKeyRaw ("raw") when the
// directory was first written without a key, metaKeyPrefix+version
// (privacy.Pseudonymizer.Fingerprint) for every key version used.
const (
	metaKeyRaw    = "key/raw"
	metaKeyPrefix = "key/v"
)

// CheckKey compares the key (nil: none) with the fingerprints the
// directory records, and records it on first use: a directory without any
// record takes the key (or "raw ids") it is first opened with; a new key
// version is a rotation and is recorded next to the old ones. It fails
// with ErrKeyMismatch, before anything is processed, when a keyed
// directory is opened without a key, with a different key of a recorded
// version, or a raw-id directory with a key.
func CheckKey(ctx context.Context, st *state.Store, ps *privacy.Pseudonymizer) error {
	r := st.NewReader()
	raw, err := r.Meta(metaKeyRaw)
	if err != nil {
		r.Discard()
		return err
	}
	keyed, err := r.MetaPrefix(metaKeyPrefix)
	r.Discard()
	if err != nil {
		return err
	}
	if ps == nil {
		switch {
		case len(keyed) > 0:
			return fmt.Errorf("%w: it was written with a key (version %s); set privacy.key_file or %s", ErrKeyMismatch, versions(keyed), privacy.KeyFileEnv)
		case raw != nil:
			return nil
		}
		return commitMeta(ctx, st, metaKeyRaw, []byte("raw"))
	}
	if raw != nil {
		return fmt.Errorf("%w: it stores raw user ids (written without a key); start a new directory to pseudonymise", ErrKeyMismatch)
	}
	name := metaKeyPrefix + strconv.Itoa(ps.Version())
	fp := ps.Fingerprint()
	if got, ok := keyed[name]; ok {
		if string(got) != fp {
			return fmt.Errorf("%w: key version %d has fingerprint %s here, the configured key %s", ErrKeyMismatch, ps.Version(), got, fp)
		}
		return nil
	}
	return commitMeta(ctx, st, name, []byte(fp))
}

func versions(m map[string][]byte) string {
	s := ""
	for k := range m {
		if s != "" {
			s += ", "
		}
		s += k[len(metaKeyPrefix):]
	}
	return s
}

func commitMeta(ctx context.Context, st *state.Store, name string, v []byte) error {
	if _, err := st.Commit(ctx, &state.Commit{Meta: state.Meta{Keys: map[string][]byte{name: v}}}); err != nil {
		return fmt.Errorf("pipeline: record key fingerprint: %w", err)
	}
	return nil
}
