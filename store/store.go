package store

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"

	"drainsight/model"
)

// DefaultLockTimeout is how long Open waits for the file lock when the caller
// passes a timeout <= 0. bbolt itself would wait forever.
const DefaultLockTimeout = 2 * time.Second

// ErrLocked is wrapped by Open when another process (or another Open in this
// process) holds the file.
var ErrLocked = errors.New("file is locked")

// ErrNotFound is returned by methods that address a record that does not exist.
var ErrNotFound = errors.New("store: not found")

var (
	bucketTanks       = []byte("tanks")
	bucketFits        = []byte("fits")
	bucketIdle        = []byte("idle")
	bucketMeta        = []byte("meta")
	bucketMaintenance = []byte("maintenance")
	bucketAlerts      = []byte("alerts")
	bucketRuns        = []byte("runs")
	bucketTransitions = []byte("transitions")

	keyCheckpoint = []byte("checkpoint")
	keyDetector   = []byte("detector")
	keyFeed       = []byte("feed")
)

// Store is the durable state. It is safe for concurrent use; see the package
// documentation.
type Store struct {
	db   *bolt.DB
	path string
}

// Open opens (creating if needed) the state file at path, waiting at most
// timeout for its lock (timeout <= 0 means DefaultLockTimeout). When the lock
// is held elsewhere the error names the file and wraps ErrLocked.
func Open(path string, timeout time.Duration) (*Store, error) {
	if timeout <= 0 {
		timeout = DefaultLockTimeout
	}
	if err := checkFile(path); err != nil {
		return nil, err
	}
	db, err := openDB(path, &bolt.Options{Timeout: timeout})
	if err != nil {
		if errors.Is(err, berrors.ErrTimeout) {
			return nil, fmt.Errorf("store: open %s: held by another drainsight process or another Open in this process, waited %v: %w (%w)",
				path, timeout, ErrLocked, err)
		}
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		for _, b := range [][]byte{bucketTanks, bucketMaintenance, bucketAlerts, bucketRuns, bucketTransitions} {
			if _, err := tx.CreateBucketIfNotExists(b); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("store: initialise %s: %w", path, err)
	}
	return &Store{db: db, path: path}, nil
}

// Path returns the file name given to Open.
func (s *Store) Path() string { return s.path }

// Close releases the file. It waits for open transactions to finish.
func (s *Store) Close() error {
	if err := s.db.Close(); err != nil {
		return fmt.Errorf("store: close %s: %w", s.path, err)
	}
	return nil
}

// Backup writes a consistent copy of the whole file to w while the store
// stays in use (a read transaction).
func (s *Store) Backup(w io.Writer) (int64, error) {
	var n int64
	err := s.view(func(tx *bolt.Tx) error {
		var err error
		n, err = tx.WriteTo(w)
		return err
	})
	if err != nil {
		return n, fmt.Errorf("store: backup %s: %w", s.path, err)
	}
	return n, nil
}

// timeKey encodes a Unix-nanosecond time so that byte order is time order,
// negative times included (the sign bit is flipped).
func timeKey(ns int64) []byte {
	var k [8]byte
	binary.BigEndian.PutUint64(k[:], uint64(ns)^(1<<63))
	return k[:]
}

func keyTime(k []byte) int64 { return int64(binary.BigEndian.Uint64(k) ^ (1 << 63)) }

// Checkpoint records how far one tank's history has been analysed.
//
// CommittedNs is the exclusive end of the analysed history: every sample with
// time < CommittedNs has been read, and every drain and idle period that ended
// before it is in the store. ResumeNs (<= CommittedNs) is where the next pull
// must start so that a drain still open at CommittedNs is seen whole; it
// equals CommittedNs when nothing was open. UpdatedNs is the evaluation time
// of the last pass that completed, as passed by the caller (the store reads
// no clock; the scan never records one later than the data it read). Samples
// and Drains count what the scan that wrote this checkpoint saw, for status
// pages.
type Checkpoint struct {
	CommittedNs int64
	ResumeNs    int64
	UpdatedNs   int64
	Samples     int64
	Drains      int
}

// TankCommit is everything one scan produced for one tank.
//
// Fits and Idles are upserted by EndNs. If ReplaceToNs > ReplaceFromNs, the
// stored fits and idle fits with EndNs in [ReplaceFromNs, ReplaceToNs) are
// deleted first, so a re-analysis whose segmentation moved a drain's end does
// not leave the old fit behind. A nil DetectorState or Checkpoint leaves the
// stored one unchanged.
type TankCommit struct {
	Fits          []model.Fit
	Idles         []model.IdleFit
	DetectorState []byte
	Checkpoint    *Checkpoint
	ReplaceFromNs int64
	ReplaceToNs   int64
	// Outbox is queued in the same transaction (see OutboxItem): what
	// must leave the process because of this commit, such as the fits'
	// write-back, is never lost to a crash between the two.
	Outbox []OutboxItem
}

// CommitTank writes c for tank in one transaction: either all of it is
// durable when CommitTank returns nil, or none of it is. A fit or idle fit
// whose Tank field is neither empty nor equal to tank is an error and nothing
// is written.
func (s *Store) CommitTank(tank string, c TankCommit) error {
	if tank == "" {
		return errors.New("store: commit: empty tank id")
	}
	if c.Checkpoint != nil && c.Checkpoint.ResumeNs > c.Checkpoint.CommittedNs {
		return fmt.Errorf("store: commit tank %q: checkpoint resume %d is after committed %d",
			tank, c.Checkpoint.ResumeNs, c.Checkpoint.CommittedNs)
	}
	err := s.update(func(tx *bolt.Tx) error {
		tb, err := tx.Bucket(bucketTanks).CreateBucketIfNotExists([]byte(tank))
		if err != nil {
			return err
		}
		fits, err := tb.CreateBucketIfNotExists(bucketFits)
		if err != nil {
			return err
		}
		idle, err := tb.CreateBucketIfNotExists(bucketIdle)
		if err != nil {
			return err
		}
		meta, err := tb.CreateBucketIfNotExists(bucketMeta)
		if err != nil {
			return err
		}
		if c.ReplaceToNs > c.ReplaceFromNs {
			for _, b := range []*bolt.Bucket{fits, idle} {
				if err := deleteRange(b, c.ReplaceFromNs, c.ReplaceToNs); err != nil {
					return err
				}
			}
		}
		for i := range c.Fits {
			f := &c.Fits[i]
			if f.Tank != "" && f.Tank != tank {
				return fmt.Errorf("fit %d (end %d) belongs to tank %q", i, f.EndNs, f.Tank)
			}
			v, err := encodeFlat(f)
			if err != nil {
				return fmt.Errorf("fit %d: %w", i, err)
			}
			if err := put(fits, timeKey(f.EndNs), v); err != nil {
				return err
			}
		}
		for i := range c.Idles {
			f := &c.Idles[i]
			if f.Tank != "" && f.Tank != tank {
				return fmt.Errorf("idle fit %d (end %d) belongs to tank %q", i, f.EndNs, f.Tank)
			}
			v, err := encodeFlat(f)
			if err != nil {
				return fmt.Errorf("idle fit %d: %w", i, err)
			}
			if err := put(idle, timeKey(f.EndNs), v); err != nil {
				return err
			}
		}
		if c.DetectorState != nil {
			if err := put(meta, keyDetector, c.DetectorState); err != nil {
				return err
			}
		}
		if c.Checkpoint != nil {
			v, err := json.Marshal(c.Checkpoint)
			if err != nil {
				return err
			}
			if err := put(meta, keyCheckpoint, v); err != nil {
				return err
			}
		}
		return putOutbox(tx, c.Outbox)
	})
	if err != nil {
		return fmt.Errorf("store: commit tank %q: %w", tank, err)
	}
	return nil
}

// deleteRange removes keys in [from, to); keys are collected first because
// deleting under a cursor can skip keys.
func deleteRange(b *bolt.Bucket, fromNs, toNs int64) error {
	var keys [][]byte
	c := b.Cursor()
	end := timeKey(toNs)
	for k, _ := c.Seek(timeKey(fromNs)); k != nil && bytes.Compare(k, end) < 0; k, _ = c.Next() {
		keys = append(keys, bytes.Clone(k))
	}
	for _, k := range keys {
		if err := b.Delete(k); err != nil {
			return err
		}
	}
	return nil
}

// tankBucket returns tanks/<tank>/<name>, or nil when it does not exist.
func tankBucket(tx *bolt.Tx, tank string, name []byte) *bolt.Bucket {
	tb := tx.Bucket(bucketTanks).Bucket([]byte(tank))
	if tb == nil {
		return nil
	}
	return tb.Bucket(name)
}

// scanRange calls fn for each value with key time in [fromNs, toNs).
func scanRange(b *bolt.Bucket, fromNs, toNs int64, fn func(v []byte) error) error {
	if b == nil || toNs <= fromNs {
		return nil
	}
	c := b.Cursor()
	end := timeKey(toNs)
	for k, v := c.Seek(timeKey(fromNs)); k != nil && bytes.Compare(k, end) < 0; k, v = c.Next() {
		p, err := unseal(v, func() string { return fmt.Sprintf("record at %d", keyTime(k)) })
		if err != nil {
			return err
		}
		if err := fn(p); err != nil {
			return fmt.Errorf("key %d: %w", keyTime(k), err)
		}
	}
	return nil
}

// Fits returns the tank's fits with EndNs in [fromNs, toNs), oldest first.
// Use math.MinInt64, math.MaxInt64 for all of them.
func (s *Store) Fits(tank string, fromNs, toNs int64) ([]model.Fit, error) {
	var out []model.Fit
	err := s.view(func(tx *bolt.Tx) error {
		return scanRange(tankBucket(tx, tank, bucketFits), fromNs, toNs, func(v []byte) error {
			var f model.Fit
			if err := decodeFlat(v, &f); err != nil {
				return err
			}
			out = append(out, f)
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: fits of tank %q: %w", tank, err)
	}
	return out, nil
}

// Idles returns the tank's idle fits with EndNs in [fromNs, toNs), oldest first.
func (s *Store) Idles(tank string, fromNs, toNs int64) ([]model.IdleFit, error) {
	var out []model.IdleFit
	err := s.view(func(tx *bolt.Tx) error {
		return scanRange(tankBucket(tx, tank, bucketIdle), fromNs, toNs, func(v []byte) error {
			var f model.IdleFit
			if err := decodeFlat(v, &f); err != nil {
				return err
			}
			out = append(out, f)
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: idle fits of tank %q: %w", tank, err)
	}
	return out, nil
}

// Checkpoint returns the tank's checkpoint; ok is false when none was committed.
func (s *Store) Checkpoint(tank string) (cp Checkpoint, ok bool, err error) {
	err = s.view(func(tx *bolt.Tx) error {
		b := tankBucket(tx, tank, bucketMeta)
		if b == nil {
			return nil
		}
		v, err := get(b, keyCheckpoint, "checkpoint")
		if v == nil || err != nil {
			return err
		}
		ok = true
		return json.Unmarshal(v, &cp)
	})
	if err != nil {
		return Checkpoint{}, false, fmt.Errorf("store: checkpoint of tank %q: %w", tank, err)
	}
	return cp, ok, nil
}

// DetectorState returns a copy of the tank's detector blob, nil when none.
func (s *Store) DetectorState(tank string) ([]byte, error) {
	var out []byte
	err := s.view(func(tx *bolt.Tx) error {
		if b := tankBucket(tx, tank, bucketMeta); b != nil {
			v, err := get(b, keyDetector, "detector state of tank "+tank)
			out = bytes.Clone(v)
			return err
		}
		return nil
	})
	return out, err
}

// PutFeeds stores each tank's feed status (an opaque blob from the caller:
// where its level feed stood at the end of a pass) in one transaction,
// replacing the previous one. The feed status is a record of its own, kept
// beside the detector state, not among the alert records: data availability
// is the data path's condition, not a tank finding.
func (s *Store) PutFeeds(feeds map[string][]byte) error {
	err := s.update(func(tx *bolt.Tx) error {
		for tank, v := range feeds {
			if tank == "" {
				return errors.New("empty tank id")
			}
			tb, err := tx.Bucket(bucketTanks).CreateBucketIfNotExists([]byte(tank))
			if err != nil {
				return err
			}
			meta, err := tb.CreateBucketIfNotExists(bucketMeta)
			if err != nil {
				return err
			}
			if err := put(meta, keyFeed, v); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("store: put feed status: %w", err)
	}
	return nil
}

// Feed returns a copy of the tank's feed status blob, nil when none was
// stored.
func (s *Store) Feed(tank string) ([]byte, error) {
	var out []byte
	err := s.view(func(tx *bolt.Tx) error {
		if b := tankBucket(tx, tank, bucketMeta); b != nil {
			v, err := get(b, keyFeed, "feed status of tank "+tank)
			out = bytes.Clone(v)
			return err
		}
		return nil
	})
	return out, err
}

// Tanks returns the ids of all tanks with committed state, sorted bytewise.
func (s *Store) Tanks() ([]string, error) {
	var out []string
	err := s.view(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketTanks).ForEachBucket(func(k []byte) error {
			out = append(out, string(k))
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: list tanks: %w", err)
	}
	return out, nil
}

// DeleteTank removes everything stored under tanks/<tank> (fits, idle fits,
// detector state, checkpoint, feed status). Maintenance and alert records
// are kept.
func (s *Store) DeleteTank(tank string) error {
	err := s.update(func(tx *bolt.Tx) error {
		err := tx.Bucket(bucketTanks).DeleteBucket([]byte(tank))
		if errors.Is(err, berrors.ErrBucketNotFound) {
			return ErrNotFound
		}
		return err
	})
	if err != nil {
		return fmt.Errorf("store: delete tank %q: %w", tank, err)
	}
	return nil
}

// Action is what was done to a tank during maintenance.
type Action string

// The maintenance actions. A cleaned, repaired or replaced outlet resets the
// detector's baseline; a calibrated sensor resets the sensor checks. An
// accepted commissioning test (ActionCommissioned, written by `drainsight
// commission --accept`, never by hand) resets the baseline at the start of
// the test and anchors it at the test's K.
const (
	ActionCleaned          Action = "cleaned"
	ActionRepaired         Action = "repaired"
	ActionReplaced         Action = "replaced"
	ActionSensorCalibrated Action = "sensor-calibrated"
	ActionCommissioned     Action = "commissioned"
)

// ParseAction checks s against the actions a person records by hand
// (ActionCommissioned is not one: it carries the test's result).
func ParseAction(s string) (Action, error) {
	switch a := Action(s); a {
	case ActionCleaned, ActionRepaired, ActionReplaced, ActionSensorCalibrated:
		return a, nil
	}
	return "", fmt.Errorf("store: unknown maintenance action %q (want cleaned, repaired, replaced or sensor-calibrated)", s)
}

// Maintenance is one maintenance record. ID is assigned by AddMaintenance.
type Maintenance struct {
	ID     uint64 `json:"id"`
	Tank   string `json:"tank"`
	AtNs   int64  `json:"at_ns"`
	Action Action `json:"action"`
	Note   string `json:"note,omitempty"`
	// Test is the accepted commissioning test of an ActionCommissioned
	// record (nil otherwise); AtNs is the start of its window.
	Test *Commissioning `json:"test,omitempty"`
}

// Commissioning is the result of an accepted commissioning drain test: its
// window ends at UntilNs, Drains drains were fitted in it, and their
// precision-weighted K is KM25s (m^2.5/s) with standard error KSEM25s.
type Commissioning struct {
	UntilNs int64   `json:"until_ns"`
	Drains  int     `json:"drains"`
	KM25s   float64 `json:"k_m25s"`
	KSEM25s float64 `json:"k_se_m25s"`
}

// check says what is wrong with m's action and test, if anything.
func (m Maintenance) check() error {
	if m.Action == ActionCommissioned {
		t := m.Test
		switch {
		case t == nil:
			return errors.New("a commissioned record needs its test result")
		case t.UntilNs <= m.AtNs:
			return fmt.Errorf("commissioning test window ends at %d ns, not after its start %d ns", t.UntilNs, m.AtNs)
		case !(t.KM25s > 0) || math.IsInf(t.KM25s, 0) || !(t.KSEM25s >= 0) || math.IsInf(t.KSEM25s, 0) || t.Drains < 1:
			return fmt.Errorf("commissioning test result K %g ± %g m^2.5/s from %d drains is not usable", t.KM25s, t.KSEM25s, t.Drains)
		}
		return nil
	}
	if m.Test != nil {
		return fmt.Errorf("a %s record carries no test result", m.Action)
	}
	_, err := ParseAction(string(m.Action))
	return err
}

// AddMaintenance stores m under a new id (m.ID is ignored) and returns the id.
func (s *Store) AddMaintenance(m Maintenance) (uint64, error) {
	if m.Tank == "" {
		return 0, errors.New("store: add maintenance: empty tank id")
	}
	if err := m.check(); err != nil {
		return 0, fmt.Errorf("store: add maintenance for tank %q: %w", m.Tank, err)
	}
	err := s.update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketMaintenance)
		id, err := b.NextSequence()
		if err != nil {
			return err
		}
		m.ID = id
		v, err := json.Marshal(m)
		if err != nil {
			return err
		}
		return put(b, binary.BigEndian.AppendUint64(nil, id), v)
	})
	if err != nil {
		return 0, fmt.Errorf("store: add maintenance for tank %q: %w", m.Tank, err)
	}
	return m.ID, nil
}

// Maintenance lists the records of tank (all tanks when tank is ""), ordered
// by AtNs, then ID.
func (s *Store) Maintenance(tank string) ([]Maintenance, error) {
	var out []Maintenance
	err := s.view(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketMaintenance).ForEach(func(k, v []byte) error {
			v, err := unseal(v, func() string { return fmt.Sprintf("maintenance record %d", binary.BigEndian.Uint64(k)) })
			if err != nil {
				return err
			}
			var m Maintenance
			if err := json.Unmarshal(v, &m); err != nil {
				return fmt.Errorf("record %d: %w", binary.BigEndian.Uint64(k), err)
			}
			if tank == "" || m.Tank == tank {
				out = append(out, m)
			}
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: maintenance of tank %q: %w", tank, err)
	}
	slices.SortStableFunc(out, func(a, b Maintenance) int {
		if a.AtNs != b.AtNs {
			return cmpInt64(a.AtNs, b.AtNs)
		}
		return cmpInt64(int64(a.ID), int64(b.ID))
	})
	return out, nil
}

func cmpInt64(a, b int64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// RemoveMaintenance deletes the record with the given id; it returns an
// error wrapping ErrNotFound when there is none.
func (s *Store) RemoveMaintenance(id uint64) error {
	err := s.update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketMaintenance)
		k := binary.BigEndian.AppendUint64(nil, id)
		if b.Get(k) == nil {
			return ErrNotFound
		}
		return b.Delete(k)
	})
	if err != nil {
		return fmt.Errorf("store: remove maintenance %d: %w", id, err)
	}
	return nil
}

// AlertKey identifies one alert's lifecycle record. Its String form is
// "tank|kind|subtype"; inside the file the parts are separated by NUL bytes so
// that a '|' in a tank id cannot make two keys collide.
type AlertKey struct {
	Tank, Kind, Subtype string
}

func (k AlertKey) String() string { return k.Tank + "|" + k.Kind + "|" + k.Subtype }

func (k AlertKey) bytes() ([]byte, error) {
	if k.Tank == "" || k.Kind == "" {
		return nil, fmt.Errorf("store: alert key %q: tank and kind are required", k.String())
	}
	if strings.ContainsRune(k.Tank+k.Kind+k.Subtype, 0) {
		return nil, fmt.Errorf("store: alert key %q: contains a NUL byte", k.String())
	}
	return []byte(k.Tank + "\x00" + k.Kind + "\x00" + k.Subtype), nil
}

func parseAlertKey(b []byte) AlertKey {
	p := strings.SplitN(string(b), "\x00", 3)
	for len(p) < 3 {
		p = append(p, "")
	}
	return AlertKey{Tank: p[0], Kind: p[1], Subtype: p[2]}
}

// AlertRecord is one stored alert blob (opaque to the store).
type AlertRecord struct {
	Key  AlertKey
	Data []byte
}

// Transition is one alert transition kept for the tank's history (what
// `drainsight export` lists): the tank, the time, its stable id (the same
// transition stored twice is kept once) and the caller's encoding of it.
type Transition struct {
	Tank string
	AtNs int64
	ID   string
	Data []byte
}

func (h Transition) key() []byte {
	k := append([]byte(h.Tank), 0)
	k = binary.BigEndian.AppendUint64(k, uint64(h.AtNs))
	return append(k, h.ID...)
}

// Transitions lists the stored transitions of tank ("" for every tank)
// with AtNs in [fromNs, toNs), by tank, then time.
func (s *Store) Transitions(tank string, fromNs, toNs int64) ([]Transition, error) {
	var out []Transition
	err := s.view(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketTransitions)
		if b == nil {
			return nil // a file written before transitions were kept
		}
		return b.ForEach(func(k, v []byte) error {
			z := bytes.IndexByte(k, 0)
			if z < 0 || len(k) < z+9 {
				return fmt.Errorf("%w: transition key %q", ErrDamaged, k)
			}
			h := Transition{Tank: string(k[:z]), AtNs: int64(binary.BigEndian.Uint64(k[z+1 : z+9])), ID: string(k[z+9:])}
			if tank != "" && h.Tank != tank || h.AtNs < fromNs || h.AtNs >= toNs {
				return nil
			}
			data, err := unseal(v, func() string { return fmt.Sprintf("transition %q", h.ID) })
			if err != nil {
				return err
			}
			h.Data = data
			out = append(out, h)
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: transitions of tank %q: %w", tank, err)
	}
	return out, nil
}

// UpdateAlerts stores recs, deletes del, keeps the transitions hist and
// queues out (the notifications of those transitions) in one transaction. Deleting a key that does
// not exist is not an error.
func (s *Store) UpdateAlerts(recs []AlertRecord, del []AlertKey, hist []Transition, out ...OutboxItem) error {
	err := s.update(func(tx *bolt.Tx) error {
		if err := putOutbox(tx, out); err != nil {
			return err
		}
		tb := tx.Bucket(bucketTransitions)
		for _, h := range hist {
			if err := put(tb, h.key(), h.Data); err != nil {
				return err
			}
		}
		b := tx.Bucket(bucketAlerts)
		for _, r := range recs {
			k, err := r.Key.bytes()
			if err != nil {
				return err
			}
			if err := put(b, k, r.Data); err != nil {
				return err
			}
		}
		for _, key := range del {
			k, err := key.bytes()
			if err != nil {
				return err
			}
			if err := b.Delete(k); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("store: update alerts: %w", err)
	}
	return nil
}

// Alert returns a copy of one alert blob; ok is false when there is none.
func (s *Store) Alert(key AlertKey) (data []byte, ok bool, err error) {
	k, err := key.bytes()
	if err != nil {
		return nil, false, err
	}
	err = s.view(func(tx *bolt.Tx) error {
		v, err := get(tx.Bucket(bucketAlerts), k, "alert record")
		if v != nil {
			data, ok = bytes.Clone(v), true
		}
		return err
	})
	return data, ok, err
}

// Alerts lists the alert records of tank (all when tank is ""), ordered by key.
func (s *Store) Alerts(tank string) ([]AlertRecord, error) {
	var out []AlertRecord
	var prefix []byte
	if tank != "" {
		prefix = []byte(tank + "\x00")
	}
	err := s.view(func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketAlerts).Cursor()
		for k, v := c.Seek(prefix); k != nil && bytes.HasPrefix(k, prefix); k, v = c.Next() {
			p, err := unseal(v, func() string { return "alert record " + parseAlertKey(k).String() })
			if err != nil {
				return err
			}
			out = append(out, AlertRecord{Key: parseAlertKey(k), Data: bytes.Clone(p)})
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("store: list alerts: %w", err)
	}
	return out, nil
}

// JobRun is the last attempt and the last success of one scheduled job.
type JobRun struct {
	Job           string `json:"job"`
	LastAttemptNs int64  `json:"last_attempt_ns"`
	LastSuccessNs int64  `json:"last_success_ns"` // 0 when it never succeeded
	LastError     string `json:"last_error,omitempty"`
	Failures      int    `json:"consecutive_failures"`
}

// RecordRun notes that job ran at atNs (Unix ns, from the caller's clock) and
// ended with runErr (nil for success).
func (s *Store) RecordRun(job string, atNs int64, runErr error) error {
	if job == "" {
		return errors.New("store: record run: empty job name")
	}
	err := s.update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketRuns)
		r := JobRun{Job: job}
		v, err := get(b, []byte(job), "job run")
		if err != nil {
			return err
		}
		if v != nil {
			if err := json.Unmarshal(v, &r); err != nil {
				return err
			}
		}
		r.LastAttemptNs = atNs
		if runErr == nil {
			r.LastSuccessNs, r.LastError, r.Failures = atNs, "", 0
		} else {
			r.LastError = runErr.Error()
			r.Failures++
		}
		nv, err := json.Marshal(r)
		if err != nil {
			return err
		}
		return put(b, []byte(job), nv)
	})
	if err != nil {
		return fmt.Errorf("store: record run of job %q: %w", job, err)
	}
	return nil
}

// JobRuns returns the run record of every job, ordered by name.
func (s *Store) JobRuns() ([]JobRun, error) {
	var out []JobRun
	err := s.view(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketRuns).ForEach(func(k, v []byte) error {
			v, err := unseal(v, func() string { return fmt.Sprintf("job run %q", k) })
			if err != nil {
				return err
			}
			var r JobRun
			if err := json.Unmarshal(v, &r); err != nil {
				return fmt.Errorf("job %q: %w", k, err)
			}
			out = append(out, r)
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: list job runs: %w", err)
	}
	return out, nil
}

// JobRun returns one job's record; ok is false when it never ran.
func (s *Store) JobRun(job string) (r JobRun, ok bool, err error) {
	err = s.view(func(tx *bolt.Tx) error {
		v, err := get(tx.Bucket(bucketRuns), []byte(job), "job run")
		if v == nil || err != nil {
			return err
		}
		ok = true
		return json.Unmarshal(v, &r)
	})
	if err != nil {
		return JobRun{}, false, fmt.Errorf("store: job run %q: %w", job, err)
	}
	return r, ok, nil
}
