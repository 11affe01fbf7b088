package api

import (
	"container/list"
	"fmt"
	"sync"
	"time"
)

// kind says what a store item holds; with an id (and, for a
// preconditioner, its settings) it keys the item.
type kind uint8

const (
	kindMatrix    kind = iota + 1 // a stored matrix: *matrixEntry
	kindVector                    // a stored vector: *vectorEntry
	kindTranspose                 // the transpose sparse keeps for a matrix's Aᵀ products (no value)
	kindSetup                     // a cached preconditioner set-up: *setupEntry
	kindJob                       // a job's vectors and kept solutions: *job
)

// key identifies a store item: the matrix, vector or job id, and for a
// preconditioner set-up the settings it was built with.
type key struct {
	kind kind
	id   string
	sub  string
}

// store accounts for the server's large allocations against one byte
// budget: stored matrices and vectors, cached preconditioners, running
// jobs' vectors and kept solutions. Each is an item with a size and a pin
// count; making room evicts idle (unpinned) items, least recently used
// first, and never touches a pinned one, so a matrix a job uses stays.
//
// Space is reserved before the allocation it stands for (reserve), then the
// reservation becomes an item (insert) or is given back (release). Pins are
// handles: acquire and insert return a *pin, and Release gives it back,
// once, however often it is called.
//
// The fairness rule: a matrix, vector or kept solution used (uploaded,
// solved with, downloaded) within the last protect is not evicted to make
// room for anything; the reservation is refused with ErrLimit instead, so
// one client's upload cannot push out the matrix another client is working
// with. Cached preconditioners and transposes can be rebuilt from their
// matrix, so they are evicted whenever idle.
type store struct {
	budget  int64
	protect time.Duration
	now     func() time.Time

	mu sync.Mutex // guards everything below and every item's fields
	// used counts the bytes of all items plus outstanding reservations.
	used  int64
	items map[key]*item
	// lru orders the items, most recently used at the front.
	lru list.List
	// uploading counts the part of used reserved by uploads in progress
	// (noteUpload), for the refusal message.
	uploading int64
}

// item is one accounted allocation. Its fields are guarded by store.mu,
// except value, which is set at insertion and never changes.
type item struct {
	key   key
	bytes int64
	pins  int
	elem  *list.Element
	value any
	// last is when the item was last used (inserted, acquired, touched or
	// released).
	last time.Time
	// onEvict, if set, runs (without store.mu held) after the item was
	// evicted to make room or deleted, to drop references to its memory.
	onEvict func()
}

// pin holds one pin on an item until Release.
type pin struct {
	s    *store
	it   *item
	once sync.Once
	drop bool // the last release deletes the item (see insertDropping)
}

// Release gives the pin back; the item may then be evicted (or, for a pin
// of insertDropping, is deleted when it was the last). Calling it again
// does nothing.
func (p *pin) Release() {
	if p == nil {
		return
	}
	p.once.Do(func() { p.s.unpin(p.it, p.drop) })
}

func newStore(budget int64, protect time.Duration) *store {
	s := &store{budget: budget, protect: protect, now: time.Now, items: make(map[key]*item)}
	s.lru.Init()
	return s
}

// reserve sets aside n bytes, evicting idle items as needed (never a
// protected one, see the fairness rule on store). It fails with ErrLimit,
// evicting nothing, when the budget cannot hold n bytes even with every
// evictable item evicted; the error says what holds the memory.
func (s *store) reserve(n int64, what string) error {
	var evicted []*item
	s.mu.Lock()
	if n > s.budget {
		s.mu.Unlock()
		return limitf("%s needs %s, more than the memory budget of %s", what, human(n), human(s.budget))
	}
	if s.used+n > s.budget {
		now := s.now()
		var free, pinned, recent, items int64
		for e := s.lru.Back(); e != nil; e = e.Prev() {
			it := e.Value.(*item)
			items += it.bytes
			switch {
			case it.pins > 0:
				pinned += it.bytes
			case s.protectedLocked(it, now):
				recent += it.bytes
			default:
				free += it.bytes
			}
		}
		if s.used-free+n > s.budget {
			other := s.used - items - s.uploading
			s.mu.Unlock()
			return limitf("%s needs %s, but of the %s memory budget %s is pinned by queued or running jobs, "+
				"%s reserved by uploads in progress, %s reserved by jobs being set up, and %s held by matrices, vectors "+
				"or solutions used within the last %v (not evicted for anyone else's request)",
				what, human(n), human(s.budget), human(pinned), human(s.uploading), human(other), human(recent), s.protect)
		}
		for e := s.lru.Back(); e != nil && s.used+n > s.budget; {
			prev := e.Prev()
			if it := e.Value.(*item); it.pins == 0 && !s.protectedLocked(it, now) {
				s.removeLocked(it)
				evicted = append(evicted, it)
			}
			e = prev
		}
	}
	s.used += n
	s.mu.Unlock()
	for _, it := range evicted {
		if it.onEvict != nil {
			it.onEvict()
		}
	}
	return nil
}

// protectedLocked reports whether the fairness rule keeps it from
// eviction. s.mu must be held.
func (s *store) protectedLocked(it *item, now time.Time) bool {
	switch it.key.kind {
	case kindMatrix, kindVector, kindJob:
		return now.Sub(it.last) < s.protect
	}
	return false
}

// noteUpload records that n bytes of the reservations (negative: n bytes
// fewer) belong to an upload in progress, so that a refusal can name it.
func (s *store) noteUpload(n int64) {
	s.mu.Lock()
	s.uploading += n
	s.mu.Unlock()
}

// release gives back a reservation that did not become an item.
func (s *store) release(n int64) {
	s.mu.Lock()
	s.used -= n
	s.mu.Unlock()
}

// insert turns a reservation of n bytes into an item under k, and returns
// it with one pin held (or nil when pinned is false). If k is already
// present the reservation is released and the existing item is returned
// (pinned as asked) with existed set.
func (s *store) insert(k key, n int64, pinned bool, value any, onEvict func()) (it *item, p *pin, existed bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if old, ok := s.items[k]; ok {
		s.used -= n
		s.lru.MoveToFront(old.elem)
		old.last = s.now()
		return old, s.pinLocked(old, pinned, false), true
	}
	it = &item{key: k, bytes: n, value: value, onEvict: onEvict, last: s.now()}
	it.elem = s.lru.PushFront(it)
	s.items[k] = it
	return it, s.pinLocked(it, pinned, false), false
}

// insertDropping is insert for an item whose holders know when it is no
// longer needed: it is pinned pins times, and the release of the last pin
// deletes it (without running onEvict).
func (s *store) insertDropping(k key, n int64, pins int, value any, onEvict func()) (*item, []*pin) {
	s.mu.Lock()
	defer s.mu.Unlock()
	it := &item{key: k, bytes: n, value: value, onEvict: onEvict, last: s.now()}
	it.elem = s.lru.PushFront(it)
	s.items[k] = it
	ps := make([]*pin, pins)
	for i := range ps {
		ps[i] = s.pinLocked(it, true, true)
	}
	return it, ps
}

func (s *store) pinLocked(it *item, pinned, drop bool) *pin {
	if !pinned {
		return nil
	}
	it.pins++
	return &pin{s: s, it: it, drop: drop}
}

// acquire returns the item under k, marked used and pinned.
func (s *store) acquire(k key) (*item, *pin, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	it, ok := s.items[k]
	if !ok {
		return nil, nil, false
	}
	s.lru.MoveToFront(it.elem)
	it.last = s.now()
	return it, s.pinLocked(it, true, false), true
}

// touch marks the item under k used, without pinning it, and returns it.
func (s *store) touch(k key) (*item, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	it, ok := s.items[k]
	if ok {
		s.lru.MoveToFront(it.elem)
		it.last = s.now()
	}
	return it, ok
}

// unpin removes one pin from it; with drop, the last pin deletes it.
func (s *store) unpin(it *item, drop bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if it.pins <= 0 {
		panic(fmt.Sprintf("api: unpin of unpinned item %v", it.key))
	}
	it.pins--
	it.last = s.now()
	if drop && it.pins == 0 && s.items[it.key] == it {
		s.removeLocked(it)
	}
}

// shrink lowers an item's accounted size (a job's vectors after it ends).
// Growing is not supported: it would need a reservation.
func (s *store) shrink(it *item, n int64) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if n > it.bytes {
		panic("api: store.shrink grows an item")
	}
	if s.items[it.key] == it {
		s.used -= it.bytes - n
	}
	it.bytes = n
}

// remove deletes the item under k unless it is pinned. It reports the
// bytes freed, and ErrInUse for a pinned item.
func (s *store) remove(k key) (int64, bool, error) {
	s.mu.Lock()
	it, ok := s.items[k]
	if !ok {
		s.mu.Unlock()
		return 0, false, nil
	}
	if pins := it.pins; pins > 0 {
		s.mu.Unlock()
		return 0, true, fmt.Errorf("%w: it is used by %d queued or running jobs", ErrInUse, pins)
	}
	s.removeLocked(it)
	n, onEvict := it.bytes, it.onEvict
	s.mu.Unlock()
	if onEvict != nil {
		onEvict()
	}
	return n, true, nil
}

// removeWhere deletes the idle items that match and returns the bytes
// freed. Pinned ones stay.
func (s *store) removeWhere(match func(key) bool) int64 {
	var gone []*item
	var freed int64
	s.mu.Lock()
	for k, it := range s.items {
		if match(k) && it.pins == 0 {
			s.removeLocked(it)
			gone = append(gone, it)
			freed += it.bytes
		}
	}
	s.mu.Unlock()
	for _, it := range gone {
		if it.onEvict != nil {
			it.onEvict()
		}
	}
	return freed
}

// removeLocked takes it out of the store. s.mu must be held.
func (s *store) removeLocked(it *item) {
	s.lru.Remove(it.elem)
	delete(s.items, it.key)
	s.used -= it.bytes
}

// entry is an item as snapshot sees it.
type entry struct {
	key   key
	bytes int64
	pins  int
	value any
}

// snapshot returns the items that match, most recently used first, with
// their sizes and pin counts at the time of the call.
func (s *store) snapshot(match func(key) bool) []entry {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []entry
	for e := s.lru.Front(); e != nil; e = e.Next() {
		it := e.Value.(*item)
		if match(it.key) {
			out = append(out, entry{it.key, it.bytes, it.pins, it.value})
		}
	}
	return out
}

// usage reports the bytes in use and the budget.
func (s *store) usage() (used, budget int64) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.used, s.budget
}

// human formats a byte count for messages.
func human(n int64) string {
	const unit = 1024
	if n < unit {
		return fmt.Sprintf("%d B", n)
	}
	div, exp := int64(unit), 0
	for m := n / unit; m >= unit && exp < 4; m /= unit {
		div *= unit
		exp++
	}
	return fmt.Sprintf("%.1f %ciB", float64(n)/float64(div), "KMGTP"[exp])
}
