package api

import (
	"container/list"
	"fmt"
	"sync"
)

// store accounts for the server's large allocations against one byte
// budget: stored matrices and vectors, cached preconditioners, running
// jobs' vectors and kept solutions. Each is an item with a size and a pin
// count; making room evicts idle (unpinned) items, least recently used
// first, and never touches a pinned one, so a matrix a job uses stays.
//
// Space is reserved before the allocation it stands for (reserve), then the
// reservation becomes an item (insert) or is given back (release).
type store struct {
	budget int64

	mu sync.Mutex // guards everything below and every item's fields
	// used counts the bytes of all items plus outstanding reservations.
	used  int64
	items map[string]*item
	// lru orders the items, most recently used at the front.
	lru list.List
}

// item is one accounted allocation. Its fields are guarded by store.mu.
type item struct {
	key   string
	bytes int64
	pins  int
	elem  *list.Element
	value any
	// onEvict, if set, runs (without store.mu held) after the item was
	// evicted to make room or deleted, to drop references to its memory.
	onEvict func()
}

func newStore(budget int64) *store {
	s := &store{budget: budget, items: make(map[string]*item)}
	s.lru.Init()
	return s
}

// reserve sets aside n bytes, evicting idle items as needed. It fails with
// ErrLimit, evicting nothing, when the budget cannot hold n bytes even with
// every idle item evicted.
func (s *store) reserve(n int64, what string) error {
	var evicted []*item
	s.mu.Lock()
	if n > s.budget {
		s.mu.Unlock()
		return limitf("%s needs %s, more than the memory budget of %s", what, human(n), human(s.budget))
	}
	if s.used+n > s.budget {
		var idle int64
		for e := s.lru.Back(); e != nil; e = e.Prev() {
			if it := e.Value.(*item); it.pins == 0 {
				idle += it.bytes
			}
		}
		if s.used-idle+n > s.budget {
			pinned := s.used - idle
			s.mu.Unlock()
			return limitf("%s needs %s, but %s of the %s memory budget is in use by queued or running jobs",
				what, human(n), human(pinned), human(s.budget))
		}
		for e := s.lru.Back(); e != nil && s.used+n > s.budget; {
			prev := e.Prev()
			if it := e.Value.(*item); it.pins == 0 {
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

// release gives back a reservation that did not become an item.
func (s *store) release(n int64) {
	s.mu.Lock()
	s.used -= n
	s.mu.Unlock()
}

// insert turns a reservation of n bytes into an item under key, pinned
// pins times. If key is already present the reservation is released and the
// existing item is returned (pinned as asked) with existed set.
func (s *store) insert(key string, n int64, pins int, value any, onEvict func()) (it *item, existed bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if old, ok := s.items[key]; ok {
		s.used -= n
		old.pins += pins
		s.lru.MoveToFront(old.elem)
		return old, true
	}
	it = &item{key: key, bytes: n, pins: pins, value: value, onEvict: onEvict}
	it.elem = s.lru.PushFront(it)
	s.items[key] = it
	return it, false
}

// get returns the item under key, marking it used and adding pins pins.
func (s *store) get(key string, pins int) (*item, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	it, ok := s.items[key]
	if !ok {
		return nil, false
	}
	it.pins += pins
	s.lru.MoveToFront(it.elem)
	return it, true
}

// unpin removes one pin from it, which may then be evicted.
func (s *store) unpin(it *item) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if it.pins <= 0 {
		panic(fmt.Sprintf("api: unpin of unpinned item %s", it.key))
	}
	it.pins--
}

// shrink lowers an item's accounted size (a job's vectors after it ends).
// Growing is not supported: it would need a reservation.
func (s *store) shrink(it *item, n int64) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if n > it.bytes {
		panic("api: store.shrink grows an item")
	}
	if _, ok := s.items[it.key]; ok {
		s.used -= it.bytes - n
	}
	it.bytes = n
}

// remove deletes the item under key unless it is pinned. It reports the
// bytes freed, and ErrInUse for a pinned item.
func (s *store) remove(key string) (int64, bool, error) {
	s.mu.Lock()
	it, ok := s.items[key]
	if !ok {
		s.mu.Unlock()
		return 0, false, nil
	}
	if pins := it.pins; pins > 0 {
		s.mu.Unlock()
		return 0, true, fmt.Errorf("%w: %s is used by %d queued or running jobs", ErrInUse, key, pins)
	}
	s.removeLocked(it)
	n, onEvict := it.bytes, it.onEvict
	s.mu.Unlock()
	if onEvict != nil {
		onEvict()
	}
	return n, true, nil
}

// unpinDrop removes one pin from it and, if that was the last, deletes it
// without running onEvict: for an item whose holders know it is no longer
// needed, whoever lets go last.
func (s *store) unpinDrop(it *item) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if it.pins <= 0 {
		panic(fmt.Sprintf("api: unpin of unpinned item %s", it.key))
	}
	it.pins--
	if it.pins == 0 && s.items[it.key] == it {
		s.removeLocked(it)
	}
}

// removeWhere deletes the idle items whose keys satisfy match and returns
// the bytes freed. Pinned ones stay.
func (s *store) removeWhere(match func(key string) bool) int64 {
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

// snapshot returns the items whose keys satisfy match, most recently used
// first, with their pin counts at the time of the call.
func (s *store) snapshot(match func(key string) bool) (items []*item, pins []int) {
	s.mu.Lock()
	defer s.mu.Unlock()
	for e := s.lru.Front(); e != nil; e = e.Next() {
		it := e.Value.(*item)
		if match(it.key) {
			items = append(items, it)
			pins = append(pins, it.pins)
		}
	}
	return items, pins
}

// size returns an item's accounted bytes.
func (s *store) size(it *item) int64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	return it.bytes
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

// available reports the bytes a reservation could get now: the budget less
// the pinned items and outstanding reservations.
func (s *store) available() int64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	idle := int64(0)
	for e := s.lru.Front(); e != nil; e = e.Next() {
		if it := e.Value.(*item); it.pins == 0 {
			idle += it.bytes
		}
	}
	return s.budget - (s.used - idle)
}
