package store

import (
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"runtime/debug"

	bolt "go.etcd.io/bbolt"
)

// Every value the store writes is sealed: the payload, its CRC-32C
// (Castagnoli) and a 4-byte mark. A read unseals it and reports a value
// whose checksum fails as damage (ErrDamaged, naming the record) instead of
// handing garbage to a decoder. Values written before seals existed carry
// no mark and are read as they are.
//
// CRC-32C detects every burst error of up to 32 bits and all but 2^-32 of
// the others (Castagnoli, Bräuer & Herrmann 1993, "Optimization of cyclic
// redundancy-check codes with 24 and 32 parity bits", IEEE Trans. Commun.
// 41(6)); it is what iSCSI and ext4 metadata use.

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// sealMark ends every sealed value.
const sealMark = "\xd5ds1"

// ErrDamaged is wrapped by every error about a damaged state file: a record
// whose checksum fails, a truncated file, a page bbolt cannot read.
var ErrDamaged = errors.New("state file damaged")

func seal(v []byte) []byte {
	out := make([]byte, 0, len(v)+8)
	out = append(out, v...)
	out = binary.BigEndian.AppendUint32(out, crc32.Checksum(v, castagnoli))
	return append(out, sealMark...)
}

// unseal returns the payload of v (what names it is for the error).
func unseal(v []byte, what func() string) ([]byte, error) {
	n := len(v)
	if n < 8 || string(v[n-4:]) != sealMark {
		return v, nil // written before seals
	}
	p := v[:n-8]
	if crc32.Checksum(p, castagnoli) != binary.BigEndian.Uint32(v[n-8:n-4]) {
		return nil, fmt.Errorf("%w: %s: checksum mismatch", ErrDamaged, what())
	}
	return p, nil
}

// put stores v sealed under k.
func put(b *bolt.Bucket, k, v []byte) error { return b.Put(k, seal(v)) }

// get returns the unsealed value under k (nil when there is none).
func get(b *bolt.Bucket, k []byte, what string) ([]byte, error) {
	v := b.Get(k)
	if v == nil {
		return nil, nil
	}
	return unseal(v, func() string { return fmt.Sprintf("%s %q", what, k) })
}

// view and update run a transaction with faults and bbolt's own panics on
// a damaged file turned into an ErrDamaged error (bbolt reads the file
// through a memory map: a page past a truncated end is a fault, not an
// error).
func (s *Store) view(fn func(*bolt.Tx) error) (err error) {
	defer recoverDamage(s.path, &err)
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	return s.db.View(fn)
}

func (s *Store) update(fn func(*bolt.Tx) error) (err error) {
	defer recoverDamage(s.path, &err)
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	return s.db.Update(fn)
}

func recoverDamage(path string, err *error) {
	if r := recover(); r != nil {
		*err = fmt.Errorf("%w: %s: %v (run `drainsight state check`; restore a backup)", ErrDamaged, path, r)
	}
}
