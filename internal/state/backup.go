package state

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"hash"
	"io"
	"os"
	"path/filepath"

	"github.com/cespare/xxhash/v2"
	"github.com/dgraph-io/badger/v4"
)

// Backup format (docs/storage.md):
//
//	magic "TLBACKUP" | version byte (1) |
//	entries: uvarint len(key) | key | uvarint len(value) | value | uvarint expiresAt (Unix s, 0 = never) |
//	end: uvarint 0 (an empty key ends the list) | uvarint entry count | 8-byte xxhash64 of every byte before it
const backupMagic = "TLBACKUP"

// ErrBadBackup is returned when a backup file is truncated or corrupt.
var ErrBadBackup = errors.New("state: not a complete touchledger backup")

// Backup writes every key of the store, as of one snapshot, to w. Unlike
// Badger's own stream backup, whose reader goroutines each open their own
// transaction at slightly different times, one read transaction serves the
// whole backup, so it is a point-in-time copy even while commits continue:
// state, counters and input checkpoints always match. It returns the number
// of entries written.
func (s *Store) Backup(w io.Writer) (int, error) {
	h := xxhash.New()
	bw := bufio.NewWriterSize(io.MultiWriter(w, h), 1<<20)
	bw.WriteString(backupMagic)
	bw.WriteByte(1)
	n := 0
	var buf []byte
	err := s.db.View(func(txn *badger.Txn) error {
		it := txn.NewIterator(badger.DefaultIteratorOptions)
		defer it.Close()
		for it.Rewind(); it.Valid(); it.Next() {
			item := it.Item()
			if item.IsDeletedOrExpired() {
				continue
			}
			v, err := item.ValueCopy(nil)
			if err != nil {
				return err
			}
			buf = buf[:0]
			buf = binary.AppendUvarint(buf, uint64(len(item.Key())))
			buf = append(buf, item.Key()...)
			buf = binary.AppendUvarint(buf, uint64(len(v)))
			buf = append(buf, v...)
			buf = binary.AppendUvarint(buf, item.ExpiresAt())
			if _, err := bw.Write(buf); err != nil {
				return err
			}
			n++
		}
		return nil
	})
	if err != nil {
		return n, fmt.Errorf("state: backup: %w", err)
	}
	bw.Write(binary.AppendUvarint(binary.AppendUvarint(nil, 0), uint64(n)))
	if err := bw.Flush(); err != nil {
		return n, fmt.Errorf("state: backup: %w", err)
	}
	if _, err := w.Write(binary.BigEndian.AppendUint64(nil, h.Sum64())); err != nil {
		return n, fmt.Errorf("state: backup: %w", err)
	}
	return n, nil
}

// Restore rebuilds a data directory from a backup. dir must not exist or be
// empty; the store is written to a temporary directory beside it and renamed
// into place only when the whole backup has been read and verified, so a
// failed restore leaves nothing half-made. It returns the entries restored.
func Restore(r io.Reader, dir string, o Options) (int, error) {
	if entries, err := os.ReadDir(dir); err == nil && len(entries) > 0 {
		return 0, fmt.Errorf("state: restore into %s: directory is not empty", dir)
	}
	tmp := filepath.Join(filepath.Dir(dir), "."+filepath.Base(dir)+".restoring")
	if err := os.RemoveAll(tmp); err != nil {
		return 0, err
	}
	o.Dir = tmp
	n, err := restoreInto(r, o)
	if err != nil {
		os.RemoveAll(tmp)
		return 0, err
	}
	os.Remove(dir) // empty or missing
	if err := os.Rename(tmp, dir); err != nil {
		return 0, fmt.Errorf("state: restore: %w", err)
	}
	return n, nil
}

type hashReader struct {
	r *bufio.Reader
	h hash.Hash64
}

func (hr *hashReader) ReadByte() (byte, error) {
	b, err := hr.r.ReadByte()
	if err == nil {
		hr.h.Write([]byte{b})
	}
	return b, err
}

func (hr *hashReader) Read(p []byte) (int, error) {
	n, err := hr.r.Read(p)
	hr.h.Write(p[:n])
	return n, err
}

func restoreInto(r io.Reader, o Options) (int, error) {
	hr := &hashReader{r: bufio.NewReaderSize(r, 1<<20), h: xxhash.New()}
	head := make([]byte, len(backupMagic)+1)
	if _, err := io.ReadFull(hr, head); err != nil || string(head[:len(backupMagic)]) != backupMagic || head[len(backupMagic)] != 1 {
		return 0, ErrBadBackup
	}
	// Open without the format check: the backup carries the format key.
	st, err := openRaw(o)
	if err != nil {
		return 0, err
	}
	defer st.db.Close()
	wb := st.db.NewWriteBatch() // a fresh directory: atomicity comes from the rename
	defer wb.Cancel()
	n := 0
	readBytes := func() ([]byte, error) {
		l, err := binary.ReadUvarint(hr)
		if err != nil {
			return nil, err
		}
		if l > 1<<30 {
			return nil, ErrBadBackup
		}
		b := make([]byte, l)
		_, err = io.ReadFull(hr, b)
		return b, err
	}
	for {
		k, err := readBytes()
		if err != nil {
			return n, ErrBadBackup
		}
		if len(k) == 0 {
			break
		}
		v, err := readBytes()
		if err != nil {
			return n, ErrBadBackup
		}
		exp, err := binary.ReadUvarint(hr)
		if err != nil {
			return n, ErrBadBackup
		}
		e := badger.NewEntry(k, v)
		if exp > 0 {
			e.ExpiresAt = exp
		}
		if err := wb.SetEntry(e); err != nil {
			return n, fmt.Errorf("state: restore: %w", err)
		}
		n++
	}
	count, err := binary.ReadUvarint(hr)
	if err != nil || count != uint64(n) {
		return n, ErrBadBackup
	}
	sum := hr.h.Sum64()
	var tail [8]byte
	if _, err := io.ReadFull(hr.r, tail[:]); err != nil || binary.BigEndian.Uint64(tail[:]) != sum {
		return n, fmt.Errorf("%w: checksum mismatch", ErrBadBackup)
	}
	if err := wb.Flush(); err != nil {
		return n, fmt.Errorf("state: restore: %w", err)
	}
	return n, nil
}
