package state

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"syscall"

	"github.com/dgraph-io/badger/v4"
	"github.com/dgraph-io/badger/v4/options"
	"github.com/dgraph-io/badger/v4/table"
	"github.com/dgraph-io/ristretto/v2/z"
)

// ErrCorrupt is returned by Open and Verify when the directory's files are
// damaged or incomplete: a checksum does not match, a table file is cut
// short, the MANIFEST (Badger's list of table files) is missing next to
// data files or lists far fewer tables than the directory holds. The store
// is never opened then, so nothing is reset or answered from a part of
// the data; restore the directory from a backup (SECURITY.md).
var ErrCorrupt = errors.New("state: data directory is corrupt; restore it from a backup (ingest restore)")

// maxUnreferenced is the most table files the MANIFEST may leave out.
// After a kill -9 the tables an unfinished flush or compaction was writing
// are not listed yet, and Badger deletes them on open (their data is
// still in the memtable log or the compaction's input tables); a
// compaction writes a few tables at our sizes. More than this, or tables
// while the MANIFEST lists none, is a damaged MANIFEST, and Badger would
// delete the tables and open an emptier store.
const maxUnreferenced = 16

// checkFiles refuses a directory whose MANIFEST does not describe its
// table files (see ErrCorrupt). A directory that does not exist or holds
// no Badger files is a new store.
func checkFiles(dir string) error {
	ents, err := os.ReadDir(dir)
	if err != nil {
		if os.IsNotExist(err) {
			return nil
		}
		return fmt.Errorf("state: read %s: %w", dir, err)
	}
	tables := map[uint64]bool{}
	var data []string
	for _, e := range ents {
		name := e.Name()
		switch {
		case strings.HasSuffix(name, ".sst"):
			if id, ok := table.ParseFileID(name); ok {
				tables[id] = true
			}
			data = append(data, name)
		case strings.HasSuffix(name, ".vlog"), strings.HasSuffix(name, ".mem"), name == "KEYREGISTRY", name == "DISCARD":
			data = append(data, name)
		}
	}
	path := filepath.Join(dir, badger.ManifestFilename)
	f, err := os.Open(path)
	if os.IsNotExist(err) {
		if len(data) > 0 {
			return fmt.Errorf("%w: %s is missing next to %d data files (%s…)", ErrCorrupt, badger.ManifestFilename, len(data), data[0])
		}
		return nil
	}
	if err != nil {
		return fmt.Errorf("state: open %s: %w", path, err)
	}
	defer f.Close()
	mf, _, err := badger.ReplayManifestFile(f, 0, badger.DefaultOptions(dir))
	if err != nil {
		return fmt.Errorf("%w: %s: %v", ErrCorrupt, badger.ManifestFilename, err)
	}
	for id, tm := range mf.Tables {
		if !tables[id] {
			return fmt.Errorf("%w: table %s listed in %s is missing", ErrCorrupt, table.IDToFilename(id), badger.ManifestFilename)
		}
		if err := verifyTable(table.NewFilename(id, dir), tm); err != nil {
			return err
		}
	}
	unlisted := 0
	for id := range tables {
		if _, ok := mf.Tables[id]; !ok {
			unlisted++
		}
	}
	if unlisted > 0 && (len(mf.Tables) == 0 || unlisted > maxUnreferenced) {
		return fmt.Errorf("%w: %s lists %d tables, the directory holds %d more (a truncated %s?)",
			ErrCorrupt, badger.ManifestFilename, len(mf.Tables), unlisted, badger.ManifestFilename)
	}
	return nil
}

// verifyTable reads a table file and checks every block's checksum, on
// this goroutine: Badger opens tables on goroutines of its own, where a
// damaged file panics beyond recovery, and a table whose checksum fails
// is dropped with a log line and the store opened without it.
func verifyTable(path string, tm badger.TableManifest) (err error) {
	mf, err := z.OpenMmapFile(path, os.O_RDONLY, 0)
	if err != nil {
		return fmt.Errorf("%w: table %s: %v", ErrCorrupt, filepath.Base(path), err)
	}
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("%w: table %s: reading it panicked: %v", ErrCorrupt, filepath.Base(path), r)
		}
		mf.Close(-1)
	}()
	if len(mf.Data) == 0 {
		return fmt.Errorf("%w: table %s is empty", ErrCorrupt, filepath.Base(path))
	}
	bo := badger.DefaultOptions("")
	_, err = table.OpenTable(mf, table.Options{
		ChkMode:     options.OnTableRead,
		Compression: tm.Compression,
		BlockSize:   bo.BlockSize,
	})
	if err != nil {
		return fmt.Errorf("%w: table %s: %v", ErrCorrupt, filepath.Base(path), err)
	}
	return nil
}

// openBadger is badger.Open that turns a panic on damaged files (a table
// cut short panics while its index is read) into ErrCorrupt.
func openBadger(bo badger.Options) (db *badger.DB, err error) {
	defer func() {
		if r := recover(); r != nil {
			db, err = nil, fmt.Errorf("%w: open panicked: %v", ErrCorrupt, r)
		}
	}()
	db, err = badger.Open(bo)
	if err != nil && isChecksumErr(err) {
		err = fmt.Errorf("%w: %v", ErrCorrupt, err)
	}
	return db, err
}

func isChecksumErr(err error) bool {
	s := strings.ToLower(err.Error())
	return strings.Contains(s, "checksum") || strings.Contains(s, "corrupt") || strings.Contains(s, "invalid table") ||
		strings.Contains(s, "file does not exist for table")
}

// VerifyReport says what Verify read.
type VerifyReport struct {
	Tables int   // table files whose checksums matched
	Keys   int64 // keys read, every value with them
	Bytes  int64 // bytes of keys and values read
}

// Verify checks the store end to end: every table file's checksums, then
// every key and value read back (value checksums verified). Any failure is
// ErrCorrupt.
func (s *Store) Verify(ctx context.Context) (rep VerifyReport, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("%w: verify panicked: %v", ErrCorrupt, r)
		}
	}()
	if err := s.db.VerifyChecksum(); err != nil {
		return rep, fmt.Errorf("%w: %v", ErrCorrupt, err)
	}
	for _, t := range s.db.Tables() {
		_ = t
		rep.Tables++
	}
	err = s.db.View(func(txn *badger.Txn) error {
		it := txn.NewIterator(badger.IteratorOptions{AllVersions: false})
		defer it.Close()
		for it.Rewind(); it.Valid(); it.Next() {
			if rep.Keys&4095 == 0 {
				if err := ctx.Err(); err != nil {
					return err
				}
			}
			item := it.Item()
			if err := item.Value(func(v []byte) error {
				rep.Bytes += int64(len(item.Key()) + len(v))
				return nil
			}); err != nil {
				return fmt.Errorf("%w: key %q: %v", ErrCorrupt, item.Key()[:min(len(item.Key()), 1)], err)
			}
			rep.Keys++
		}
		return nil
	})
	return rep, err
}

// lockFree fails with ErrLocked while another process holds the
// directory's Badger lock, so the file checks above never read a
// directory a running worker is changing. (Badger takes the lock itself
// right after; the check only peeks.)
func lockFree(dir string) error {
	f, err := os.Open(filepath.Join(dir, "LOCK"))
	if err != nil {
		return nil // no lock file: nobody holds it
	}
	defer f.Close()
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		return fmt.Errorf("%w (%v)", ErrLocked, err)
	}
	return syscall.Flock(int(f.Fd()), syscall.LOCK_UN)
}
