package pipeline

import (
	"bytes"
	"encoding/json"
	"io/fs"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/internal/privacy"
)

// TestNoRawIDsWithAKey (issue 6): with a key configured, recognisable raw
// user ids appear in no file under the data directory (store and rejects),
// while the answers stay the same as without pseudonyms.
func TestNoRawIDsWithAKey(t *testing.T) {
	input := demoInput(t, 600, 3)
	// Give every user a recognisable id and add rejects that carry ids.
	re := regexp.MustCompile(`"user":"([^"]+)"`)
	marked := re.ReplaceAllString(string(input), `"user":"RAWID-$1-RAWID"`)
	marked += `{"id":"bad1","user":"RAWID-reject-RAWID","time":"nope","kind":"touch","channel":"x"}` + "\n"
	key := bytes.Repeat([]byte{7}, 32)
	ps, err := privacy.New(key, 1)
	if err != nil {
		t.Fatal(err)
	}
	plain, keyed := t.TempDir(), t.TempDir()
	replayBytes(t, plain, testConfig(), "in", []byte(marked))
	cfg := testConfig()
	cfg.Pseudonyms = ps
	cfg.PersistPending = true // buffered events are stored too: they must carry pseudonyms
	replayBytes(t, keyed, cfg, "in", []byte(marked))

	found := 0
	filepath.WalkDir(keyed, func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if n := bytes.Count(b, []byte("RAWID")); n > 0 {
			found += n
			t.Errorf("%s holds %d raw ids", path, n)
		}
		return nil
	})
	// The unkeyed store does hold them, so the scan can find what it looks for.
	plainHits := 0
	filepath.WalkDir(plain, func(path string, d fs.DirEntry, err error) error {
		if err == nil && !d.IsDir() {
			b, _ := os.ReadFile(path)
			plainHits += bytes.Count(b, []byte("RAWID"))
		}
		return err
	})
	if plainHits == 0 {
		t.Fatal("the scan finds no raw ids even without a key: it proves nothing")
	}
	a, _ := json.Marshal(answers(t, plain))
	b, _ := json.Marshal(answers(t, keyed))
	if !bytes.Equal(a, b) {
		t.Error("answers differ with pseudonyms")
	}
	rej, _ := os.ReadFile(filepath.Join(keyed, "rejects.jsonl"))
	if !strings.Contains(string(rej), `\"redacted\":true`) && !strings.Contains(string(rej), `"redacted":true`) {
		t.Errorf("rejects are not redacted: %s", rej)
	}
}
