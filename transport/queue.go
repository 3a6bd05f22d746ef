package transport

import (
	"sync"
	"sync/atomic"
)

// Inbound is one received MQTT message as the engine sees it.
type Inbound struct {
	Topic     string
	Payload   []byte // owned by the holder until handed back to Pop
	Size      int    // size of the payload as received (see Queue.Push)
	QoS       byte
	Retained  bool
	ArrivalNs int64 // receiver clock, ns since the Unix epoch
}

// Queue is the bounded hand-over between the MQTT callback (producer) and the
// engine goroutine (consumer). Push never blocks on the consumer: when the
// queue is full the oldest message is dropped and counted, because fresh
// measurements are worth more to a tracker than stale ones. Payloads are
// copied into a ring of buffers owned by the queue, and Pop swaps buffers
// with the caller instead of copying, so steady state allocates nothing.
type Queue struct {
	mu       sync.Mutex
	slots    []Inbound
	head     int // index of the oldest message
	n        int // messages queued
	maxBytes int
	ready    chan struct{}

	pushed  atomic.Uint64
	dropped atomic.Uint64
}

// NewQueue returns a queue holding up to length messages. Each slot starts
// with a bufBytes buffer that grows, once, to the largest payload seen up to
// maxBytes+1: a larger payload is cut to maxBytes+1 bytes so the decoder still
// rejects it as too_large while the queue stays bounded in memory.
func NewQueue(length, bufBytes, maxBytes int) *Queue {
	length = max(length, 1)
	maxBytes = max(maxBytes, 1)
	bufBytes = min(max(bufBytes, 64), maxBytes+1)
	q := &Queue{slots: make([]Inbound, length), maxBytes: maxBytes, ready: make(chan struct{}, 1)}
	for i := range q.slots {
		q.slots[i].Payload = make([]byte, 0, bufBytes)
	}
	return q
}

// Push copies one message into the queue. It returns false when it had to
// drop the oldest message to make room. Safe to call from any goroutine.
func (q *Queue) Push(topic string, payload []byte, qos byte, retained bool, arrivalNs int64) bool {
	keep := min(len(payload), q.maxBytes+1)
	q.mu.Lock()
	fresh := true
	if q.n == len(q.slots) {
		q.head = (q.head + 1) % len(q.slots)
		q.n--
		fresh = false
	}
	s := &q.slots[(q.head+q.n)%len(q.slots)]
	s.Topic = topic
	s.Payload = append(s.Payload[:0], payload[:keep]...)
	s.Size = len(payload)
	s.QoS = qos
	s.Retained = retained
	s.ArrivalNs = arrivalNs
	q.n++
	q.mu.Unlock()

	q.pushed.Add(1)
	if !fresh {
		q.dropped.Add(1)
	}
	select {
	case q.ready <- struct{}{}:
	default:
	}
	return fresh
}

// Pop moves the oldest message into dst and reports whether there was one.
// dst's previous payload buffer goes back into the ring, so dst.Payload is
// valid until the next Pop with the same dst.
func (q *Queue) Pop(dst *Inbound) bool {
	q.mu.Lock()
	if q.n == 0 {
		q.mu.Unlock()
		return false
	}
	s := &q.slots[q.head]
	spare := dst.Payload[:0]
	*dst = *s
	s.Payload = spare
	s.Topic = ""
	q.head = (q.head + 1) % len(q.slots)
	q.n--
	q.mu.Unlock()
	return true
}

// Ready is signalled after a Push; the consumer drains with Pop until it
// returns false, then waits on Ready again.
func (q *Queue) Ready() <-chan struct{} { return q.ready }

// Len is the number of queued messages.
func (q *Queue) Len() int {
	q.mu.Lock()
	defer q.mu.Unlock()
	return q.n
}

// Cap is the most messages the queue holds.
func (q *Queue) Cap() int { return len(q.slots) }

// Pushed counts every message offered to the queue.
func (q *Queue) Pushed() uint64 { return q.pushed.Load() }

// Dropped counts messages dropped because the queue was full.
func (q *Queue) Dropped() uint64 { return q.dropped.Load() }
