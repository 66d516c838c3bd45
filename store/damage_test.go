package store

import (
	"errors"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"drainsight/model"
)

// filledStore writes a state file of a few MiB (40 tanks of 60 fits each,
// detector blobs, checkpoints) and returns its path and the bytes in use
// (the pages its header counts).
func filledStore(t *testing.T) (string, int64) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "state.db")
	s, err := Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	for tk := range 40 {
		tank := "T" + string(rune('A'+tk%26)) + string(rune('a'+tk/26))
		var fits []model.Fit
		for i := range 60 {
			fits = append(fits, model.Fit{Tank: tank, StartNs: int64(i) * 1e12, EndNs: int64(i)*1e12 + 5e11, KM25s: 1e-3, Method: "free"})
		}
		blob := make([]byte, 2000)
		for i := range blob {
			blob[i] = byte(i * 7)
		}
		if err := s.CommitTank(tank, TankCommit{Fits: fits, DetectorState: blob, Checkpoint: &Checkpoint{CommittedNs: 1e14, ResumeNs: 1e14}}); err != nil {
			t.Fatal(err)
		}
	}
	s.Close()
	// the pages in use, from the header: the file's tail past them is
	// slack bbolt grew the file by, not data
	head := make([]byte, 4096)
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := f.ReadAt(head, 0); err != nil {
		t.Fatal(err)
	}
	m, ok := parseMeta(head)
	if !ok {
		t.Fatal("fresh file: no valid meta page")
	}
	return path, int64(m.pgid) * int64(m.pageSize)
}

// readAll reads everything back the way a scan and a report do; a damaged
// file must give an error, never a panic.
func readAll(s *Store) error {
	tanks, err := s.Tanks()
	if err != nil {
		return err
	}
	for _, tank := range tanks {
		if _, err := s.Fits(tank, 0, 1<<62); err != nil {
			return err
		}
		if _, err := s.DetectorState(tank); err != nil {
			return err
		}
		if _, _, err := s.Checkpoint(tank); err != nil {
			return err
		}
	}
	return nil
}

// detected opens the damaged file and checks it: the damage must surface
// as ErrDamaged at Open, from Check, or from reading, with a message.
func detected(t *testing.T, path string) string {
	t.Helper()
	s, err := Open(path, time.Second)
	if err != nil {
		if !errors.Is(err, ErrDamaged) {
			t.Fatalf("open of a damaged file: %v, want ErrDamaged", err)
		}
		return "open: " + err.Error()
	}
	defer s.Close()
	probs, _, err := s.Check()
	if err != nil {
		return "check: " + err.Error()
	}
	if len(probs) > 0 {
		return "check: " + probs[0].Where + ": " + probs[0].What
	}
	if err := readAll(s); err != nil {
		return "read: " + err.Error()
	}
	return ""
}

// A sound file checks clean: every record read, no problem.
func TestCheckSoundFile(t *testing.T) {
	path, _ := filledStore(t)
	s, err := Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	probs, n, err := s.Check()
	if err != nil || len(probs) > 0 || n < 40*61 {
		t.Errorf("sound file: %d problems %v, %d records, err %v; want none and at least %d records", len(probs), probs, n, err, 40*61)
	}
}

// Damage that real files suffer (a copy cut short, a disk or a careless
// tool writing over part of it, a zeroed page) is found and named, never
// a Go fault or a stack dump, never silently rebuilt.
func TestDamageDetected(t *testing.T) {
	cases := []struct {
		name   string
		damage func(path string, size int64, rng *rand.Rand) error
	}{
		{"empty", func(p string, _ int64, _ *rand.Rand) error { return os.Truncate(p, 0) }},
		{"truncated to half", func(p string, size int64, _ *rand.Rand) error { return os.Truncate(p, size/2) }},
		{"truncated by one page of data", func(p string, size int64, _ *rand.Rand) error { return os.Truncate(p, size-4096) }},
		{"header pages zeroed", func(p string, _ int64, _ *rand.Rand) error { return overwrite(p, 0, make([]byte, 8192)) }},
		{"a data page zeroed", func(p string, size int64, rng *rand.Rand) error {
			return overwrite(p, 4096*(2+rng.Int64N(size/4096-3)), make([]byte, 4096))
		}},
	}
	for seed := uint64(1); seed <= 4; seed++ {
		cases = append(cases, struct {
			name   string
			damage func(string, int64, *rand.Rand) error
		}{"16 KiB of random bytes, seed " + string(rune('0'+seed)), func(p string, size int64, rng *rand.Rand) error {
			junk := make([]byte, 16384)
			for i := range junk {
				junk[i] = byte(rng.Uint32())
			}
			return overwrite(p, 8192+rng.Int64N(size-8192-16384), junk)
		}})
	}
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path, size := filledStore(t)
			if err := c.damage(path, size, rand.New(rand.NewPCG(uint64(i), 9))); err != nil {
				t.Fatal(err)
			}
			msg := detected(t, path)
			if msg == "" {
				t.Fatalf("damage (%s) went unnoticed: open, check and reads all succeeded", c.name)
			}
			if strings.Contains(msg, "goroutine ") {
				t.Errorf("message carries a stack dump: %s", msg)
			}
			t.Logf("%s", msg)
		})
	}
}

// A record whose bytes changed under its checksum is reported by the read
// that meets it, naming the record.
func TestSealedRecordMismatch(t *testing.T) {
	v := seal([]byte(`{"KM25s":0.001}`))
	v[3] ^= 0x10
	if _, err := unseal(v, func() string { return "fit at 5" }); !errors.Is(err, ErrDamaged) || !strings.Contains(err.Error(), "fit at 5") {
		t.Errorf("flipped bit: %v, want ErrDamaged naming the record", err)
	}
	if p, err := unseal([]byte(`{"legacy":1}`), nil); err != nil || string(p) != `{"legacy":1}` {
		t.Errorf("a record from before seals: %q, %v; want it as it is", p, err)
	}
}

func overwrite(path string, off int64, b []byte) error {
	f, err := os.OpenFile(path, os.O_WRONLY, 0)
	if err != nil {
		return err
	}
	defer f.Close()
	_, err = f.WriteAt(b, off)
	return err
}
