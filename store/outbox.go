package store

import (
	"bytes"
	"cmp"
	"encoding/json"
	"errors"
	"fmt"
	"slices"

	bolt "go.etcd.io/bbolt"
)

var bucketOutbox = []byte("outbox")

// OutboxItem is one side effect waiting to leave the process (a write-back
// to a time-series database, a notification). It is queued in the same
// transaction as the state it reports (TankCommit.Outbox) or on its own
// (Enqueue), and stays until its sender marks it delivered or it expires:
// delivery is at least once, and the stable ID lets the receiver (or the
// queue itself: queueing an ID again replaces the item) drop repeats.
type OutboxItem struct {
	// ID is stable: the same effect always has the same ID.
	ID string `json:"id"`
	// Sink names where the item goes; Kind what it holds (the sender's
	// vocabulary; the store does not read them).
	Sink string `json:"sink"`
	Kind string `json:"kind"`
	// Data is the payload, opaque to the store.
	Data []byte `json:"data"`
	// QueuedNs is when the item was queued (the caller's clock);
	// NextNs the earliest time of the next attempt (0: at once).
	QueuedNs int64 `json:"queued_ns"`
	NextNs   int64 `json:"next_ns,omitempty"`
	// Attempts counts failed deliveries; LastError is the last failure.
	Attempts  int    `json:"attempts,omitempty"`
	LastError string `json:"last_error,omitempty"`
}

func (it *OutboxItem) check() error {
	if it.ID == "" || it.Sink == "" {
		return fmt.Errorf("outbox item %q: id and sink are required", it.ID)
	}
	return nil
}

func putOutbox(tx *bolt.Tx, items []OutboxItem) error {
	if len(items) == 0 {
		return nil
	}
	b, err := tx.CreateBucketIfNotExists(bucketOutbox)
	if err != nil {
		return err
	}
	for i := range items {
		if err := items[i].check(); err != nil {
			return err
		}
		v, err := json.Marshal(&items[i])
		if err != nil {
			return err
		}
		if err := put(b, []byte(items[i].ID), v); err != nil {
			return err
		}
	}
	return nil
}

// Enqueue queues items in one transaction; an item whose ID is queued
// already replaces it.
func (s *Store) Enqueue(items ...OutboxItem) error {
	if err := s.update(func(tx *bolt.Tx) error { return putOutbox(tx, items) }); err != nil {
		return fmt.Errorf("store: enqueue: %w", err)
	}
	return nil
}

// Pending lists the queued items of sink (every sink when sink is ""),
// oldest first (by QueuedNs, then ID).
func (s *Store) Pending(sink string) ([]OutboxItem, error) {
	var out []OutboxItem
	err := s.view(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketOutbox)
		if b == nil {
			return nil
		}
		return b.ForEach(func(k, v []byte) error {
			v, err := unseal(v, func() string { return fmt.Sprintf("outbox item %q", k) })
			if err != nil {
				return err
			}
			var it OutboxItem
			if err := json.Unmarshal(v, &it); err != nil {
				return fmt.Errorf("item %q: %w", k, err)
			}
			if sink == "" || it.Sink == sink {
				out = append(out, it)
			}
			return nil
		})
	})
	if err != nil {
		return nil, fmt.Errorf("store: outbox: %w", err)
	}
	slices.SortFunc(out, func(a, b OutboxItem) int {
		return cmp.Or(cmp.Compare(a.QueuedNs, b.QueuedNs), cmp.Compare(a.ID, b.ID))
	})
	return out, nil
}

// Delivered removes items from the queue (an ID not queued is no error).
// An item queued again since it was read (its Data changed) is kept: the
// newer content has not been delivered.
func (s *Store) Delivered(items ...OutboxItem) error {
	err := s.update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketOutbox)
		if b == nil {
			return nil
		}
		for _, it := range items {
			v, err := get(b, []byte(it.ID), "outbox item")
			if err != nil {
				return err
			}
			if v == nil {
				continue
			}
			var cur OutboxItem
			if err := json.Unmarshal(v, &cur); err == nil && (cur.QueuedNs != it.QueuedNs || !bytes.Equal(cur.Data, it.Data)) {
				continue
			}
			if err := b.Delete([]byte(it.ID)); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("store: outbox delivered: %w", err)
	}
	return nil
}

// ErrNotQueued is returned by Deferred for an item no longer queued.
var ErrNotQueued = errors.New("store: outbox item not queued")

// Deferred records a failed delivery of the item with id: one more
// attempt, the error, and the earliest time of the next attempt.
func (s *Store) Deferred(id string, nextNs int64, lastErr string) error {
	err := s.update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketOutbox)
		var v []byte
		if b != nil {
			var err error
			if v, err = get(b, []byte(id), "outbox item"); err != nil {
				return err
			}
		}
		if v == nil {
			return ErrNotQueued
		}
		var it OutboxItem
		if err := json.Unmarshal(v, &it); err != nil {
			return err
		}
		it.Attempts++
		it.NextNs, it.LastError = nextNs, lastErr
		nv, err := json.Marshal(&it)
		if err != nil {
			return err
		}
		return put(b, []byte(id), nv)
	})
	if err != nil {
		return fmt.Errorf("store: outbox defer %q: %w", id, err)
	}
	return nil
}
