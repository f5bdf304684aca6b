package state

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"

	"github.com/dgraph-io/badger/v4"
)

// Erasure on disk. Deleting a key in Badger writes a deletion marker that
// holds the key (the person's id or pseudonym) and leaves older versions
// in the table files and memtable logs until some compaction. EraseUser
// instead drops the key physically: Badger's DropPrefix flushes the
// memtables (their logs are deleted) and rewrites every table holding the
// prefix without it. A prefix drop also takes every longer id starting
// with the same bytes ("ann" takes "anna"): those users are copied to a
// journal first and written back after the drop; a crash in between is
// repaired by Open (restoreJournal), so no other user loses state. The
// same goes for the persisted buffered events of live input (prefix 'p'),
// whose released versions hold the person's payloads.

const (
	prefixJournal = 'j' // 'j' | key: an entry kept across a prefix drop
	// prefixErasing marks an erasure whose drop may not have run:
	// 'e' | (uvarint length | prefix)…, value empty. It holds the id, so
	// the drop takes it along (all its versions).
	prefixErasing = 'e'
)

// EraseUser removes every version of the user's stored state from the
// disk, and every version of the persisted buffered events (live input)
// that name the user (payloads holding the id quoted): released ones whose
// old versions would stay in the table files, and those still buffered
// (the processor drops them when they are released; after a restart they
// are simply not read again). Nothing else may commit meanwhile: call it
// on the processing goroutine, after the commit that took the user out.
func (s *Store) EraseUser(id string) error {
	quoted, _ := json.Marshal(id)
	prefixes := [][]byte{userKey(id), {prefixPending}}
	wb := s.db.NewWriteBatch()
	defer wb.Cancel()
	kept := 0
	err := s.db.View(func(txn *badger.Txn) error {
		for i, prefix := range prefixes {
			it := txn.NewIterator(badger.IteratorOptions{Prefix: prefix, PrefetchValues: false})
			for it.Rewind(); it.Valid(); it.Next() {
				k := it.Item().KeyCopy(nil)
				if i == 0 && bytes.Equal(k, prefixes[0]) {
					continue // the person
				}
				v, err := it.Item().ValueCopy(nil)
				if err != nil {
					it.Close()
					return err
				}
				if i == 1 && bytes.Contains(v, quoted) {
					continue // the person's buffered event
				}
				if err := wb.Set(append([]byte{prefixJournal}, k...), v); err != nil {
					it.Close()
					return err
				}
				kept++
			}
			it.Close()
		}
		return nil
	})
	if err == nil {
		// Badger drops only prefixes a reader sees keys under: one visible
		// key under each, dropped with the rest.
		marker := []byte{prefixErasing}
		for _, prefix := range prefixes {
			marker = binary.AppendUvarint(marker, uint64(len(prefix)))
			marker = append(marker, prefix...)
			if err = wb.Set(append(append([]byte(nil), prefix...), dropSentinel...), nil); err != nil {
				break
			}
		}
		if err == nil {
			if err = wb.Set(marker, nil); err == nil {
				err = wb.Flush() // the journal and the marker, before the drop
			}
		}
	}
	if err != nil {
		return fmt.Errorf("state: erase: keep what shares the prefixes: %w", err)
	}
	prefixes = append(prefixes, []byte{prefixErasing})
	if err := s.db.DropPrefix(prefixes...); err != nil {
		return fmt.Errorf("state: erase: drop: %w", err)
	}
	return s.restoreJournal(true)
}

// dropSentinel ends the key that makes a prefix visible to DropPrefix;
// 0xff bytes are not valid UTF-8, so no id or source ends with them.
var dropSentinel = []byte{0xff, 0xfe, 0xff}

// restoreJournal finishes an erasure: unless dropped says the prefix drop
// ran, it runs the drop of every erasure marker left (a crash during
// EraseUser; Open calls this; dropping twice is harmless), then writes back
// the journal's entries and deletes them. Writing an entry back is
// harmless too when nothing was dropped: it is a copy of the current value.
func (s *Store) restoreJournal(dropped bool) error {
	if !dropped {
		var prefixes [][]byte
		err := s.db.View(func(txn *badger.Txn) error {
			it := txn.NewIterator(badger.IteratorOptions{Prefix: []byte{prefixErasing}, PrefetchValues: false})
			defer it.Close()
			for it.Rewind(); it.Valid(); it.Next() {
				m := it.Item().KeyCopy(nil)[1:]
				for len(m) > 0 {
					l, k := binary.Uvarint(m)
					if k <= 0 || uint64(len(m)-k) < l {
						return fmt.Errorf("%w: erasure marker", ErrCorrupt)
					}
					prefixes = append(prefixes, m[k:k+int(l)])
					m = m[k+int(l):]
				}
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("state: erase journal: %w", err)
		}
		if len(prefixes) > 0 {
			if err := s.db.DropPrefix(append(prefixes, []byte{prefixErasing})...); err != nil {
				return fmt.Errorf("state: erase journal: drop: %w", err)
			}
		}
	}
	wb := s.db.NewWriteBatch()
	defer wb.Cancel()
	n := 0
	err := s.db.View(func(txn *badger.Txn) error {
		it := txn.NewIterator(badger.IteratorOptions{Prefix: []byte{prefixJournal}, PrefetchValues: false})
		defer it.Close()
		for it.Rewind(); it.Valid(); it.Next() {
			jk := it.Item().KeyCopy(nil)
			v, err := it.Item().ValueCopy(nil)
			if err != nil {
				return err
			}
			if err := wb.Set(jk[1:], v); err != nil {
				return err
			}
			if err := wb.Delete(jk); err != nil {
				return err
			}
			n++
		}
		return nil
	})
	if err == nil && n > 0 {
		err = wb.Flush()
	}
	if err != nil {
		return fmt.Errorf("state: erase journal: restore: %w", err)
	}
	return nil
}
