package store

import (
	"encoding/binary"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"io/fs"
	"os"
	"runtime/debug"

	bolt "go.etcd.io/bbolt"
)

// bbolt's file starts with two meta pages (ids 0 and 1), each a 16-byte page
// header and then magic, version, page size, flags, the root bucket (root
// page, sequence), the freelist page, the high-water page id, the
// transaction id and an FNV-1a 64 checksum of the fields before it
// (go.etcd.io/bbolt internal/common/meta.go, file format version 2). A
// commit writes the newer one; Open uses the valid one of the higher
// transaction id.
const (
	boltMagic   = 0xED0CDAED
	boltVersion = 2
	metaOff     = 16 // page header
	metaSumAt   = metaOff + 56
)

type boltMeta struct {
	pageSize uint32
	pgid     uint64 // pages in use: the file holds at least pgid × pageSize bytes
	txid     uint64
}

func parseMeta(p []byte) (boltMeta, bool) {
	if len(p) < metaSumAt+8 {
		return boltMeta{}, false
	}
	le := binary.LittleEndian
	if le.Uint32(p[metaOff:]) != boltMagic || le.Uint32(p[metaOff+4:]) != boltVersion {
		return boltMeta{}, false
	}
	h := fnv.New64a()
	h.Write(p[metaOff:metaSumAt])
	if h.Sum64() != le.Uint64(p[metaSumAt:]) {
		return boltMeta{}, false
	}
	return boltMeta{pageSize: le.Uint32(p[metaOff+8:]), pgid: le.Uint64(p[metaOff+40:]), txid: le.Uint64(p[metaOff+48:])}, true
}

// checkFile looks at an existing state file before bbolt maps it: an empty
// file, one with no valid meta page, or one shorter than its meta page
// says is damaged (bbolt would fault on it or, for an empty file, silently
// start afresh). A missing file is a new state file.
func checkFile(path string) error {
	f, err := os.Open(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("store: open %s: %w", path, err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return fmt.Errorf("store: open %s: %w", path, err)
	}
	size := st.Size()
	if size == 0 {
		return fmt.Errorf("%w: %s is empty (0 bytes), which drainsight never writes: restore a backup (`drainsight state backup` makes one), or remove the file to start again from no history", ErrDamaged, path)
	}
	head := make([]byte, 4096)
	n, _ := io.ReadFull(f, head)
	m0, ok0 := parseMeta(head[:n])
	var m1 boltMeta
	ok1 := false
	for _, ps := range []int64{int64(m0.pageSize), 4096, 16384, 65536} {
		if ps <= 0 || ps >= size {
			continue
		}
		p := make([]byte, metaSumAt+8)
		if k, _ := f.ReadAt(p, ps); k == len(p) {
			if m1, ok1 = parseMeta(p); ok1 {
				break
			}
		}
	}
	var m boltMeta
	switch {
	case ok0 && ok1:
		m = m0
		if m1.txid > m0.txid {
			m = m1
		}
	case ok0:
		m = m0
	case ok1:
		m = m1
	default:
		return fmt.Errorf("%w: %s (%d bytes) has no valid header page: not a drainsight state file, or overwritten; restore a backup", ErrDamaged, path, size)
	}
	if need := int64(m.pgid) * int64(m.pageSize); size < need {
		return fmt.Errorf("%w: %s is truncated: %d bytes where its header says %d; restore a backup", ErrDamaged, path, size, need)
	}
	return nil
}

// openDB is bolt.Open with a fault on a damaged page turned into an error.
func openDB(path string, opt *bolt.Options) (db *bolt.DB, err error) {
	defer func() {
		if r := recover(); r != nil {
			db, err = nil, fmt.Errorf("%w: %s: %v; restore a backup", ErrDamaged, path, r)
		}
	}()
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	return bolt.Open(path, 0o600, opt)
}

// Problem is one thing Check found wrong.
type Problem struct {
	Where string // the bucket path and key, or "file"
	What  string
}

// Check verifies the whole file: bbolt's own consistency check (every page
// reachable once, freelist and branches sound) and the checksum of every
// sealed record. It returns what is damaged (nil for a sound file) and how
// many records it read.
func (s *Store) Check() (problems []Problem, records int, err error) {
	err = s.view(func(tx *bolt.Tx) error {
		for e := range tx.Check() {
			problems = append(problems, Problem{Where: "file", What: e.Error()})
		}
		var walk func(path string, b *bolt.Bucket) error
		walk = func(path string, b *bolt.Bucket) error {
			return b.ForEach(func(k, v []byte) error {
				if v == nil {
					if sub := b.Bucket(k); sub != nil {
						return walk(path+"/"+printable(k), sub)
					}
					return nil
				}
				records++
				if _, err := unseal(v, func() string { return "" }); err != nil {
					problems = append(problems, Problem{Where: path + "/" + printable(k), What: "checksum mismatch"})
				}
				return nil
			})
		}
		return tx.ForEach(func(name []byte, b *bolt.Bucket) error {
			return walk(string(name), b)
		})
	})
	return problems, records, err
}

// printable shows a key: text as it is, binary keys (times, ids) in hex.
func printable(k []byte) string {
	for _, c := range k {
		if c < 0x20 || c > 0x7e {
			return fmt.Sprintf("%x", k)
		}
	}
	return string(k)
}
