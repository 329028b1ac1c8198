package server

import (
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"hash/fnv"
	"sync"

	"google.golang.org/protobuf/proto"
)

// syncMap is a small typed concurrent map.
type syncMap[K comparable, V any] struct {
	mu sync.RWMutex
	m  map[K]V
}

func newSyncMap[K comparable, V any]() *syncMap[K, V] { return &syncMap[K, V]{m: map[K]V{}} }

func (s *syncMap[K, V]) load(k K) (V, bool) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	v, ok := s.m[k]
	return v, ok
}

func (s *syncMap[K, V]) store(k K, v V) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.m[k] = v
}

// Id prefixes, so that a person reading logs sees what an id names.
const (
	sitePrefix   = "site-"
	targetPrefix = "tgt-"
	blockPrefix  = "blk-"
	planPrefix   = "plan-"
	tokenPrefix  = "tok-"
)

// newID returns prefix + 24 hex digits of crypto/rand (96 bits).
func newID(prefix string) string {
	var b [12]byte
	_, _ = rand.Read(b[:]) // crypto/rand.Read never fails (Go 1.24+)
	return prefix + hex.EncodeToString(b[:])
}

// requestBlockID is the id of the i-th block of a QueueBlocks call with a
// request id: derived from the request id, so that a retried call collides
// with the blocks the first one stored (see queue.go).
func requestBlockID(requestID string, i int) string {
	h := sha256.Sum256([]byte("nightloom queue request\x00" + requestID))
	return blockPrefix + "r" + hex.EncodeToString(h[:10]) + "-" + itoa(i)
}

func itoa(i int) string {
	if i == 0 {
		return "0"
	}
	var b [20]byte
	n := len(b)
	neg := i < 0
	if neg {
		i = -i
	}
	for i > 0 {
		n--
		b[n] = byte('0' + i%10)
		i /= 10
	}
	if neg {
		n--
		b[n] = '-'
	}
	return string(b[n:])
}

// marshal encodes a message deterministically (so equal messages give equal
// bytes, which the idempotency checks compare).
func marshal(m proto.Message) ([]byte, error) {
	return proto.MarshalOptions{Deterministic: true}.Marshal(m)
}

// stripe returns a lock index for a key, for striped per-site locks.
func stripe(key string, n int) int {
	h := fnv.New32a()
	_, _ = h.Write([]byte(key))
	return int(h.Sum32() % uint32(n))
}
