package scheduler

import (
	"testing"
	"time"
)

// TestLookaheadCache checks that the cache returns what NewLookahead
// computes (the reference: the uncached lookahead), that a second call
// with the same blocks reuses every block-night, that progress (frames
// done) reuses the cached windows and still changes the usable flags as
// NewLookahead does, and that a changed constraint set is recomputed.
func TestLookaheadCache(t *testing.T) {
	in := loadInstance(t, "plan200")
	site, err := in.SiteOf()
	if err != nil {
		t.Fatal(err)
	}
	blocks, err := in.BlocksOf()
	if err != nil {
		t.Fatal(err)
	}
	blocks = blocks[:60]
	day, _ := in.Date()
	const nights = 5
	step := LookaheadStep
	same := func(label string, got, want *Lookahead) {
		t.Helper()
		for i := range blocks {
			for k := 0; k < nights; k++ {
				if got.Usable(i, k) != want.Usable(i, k) {
					t.Fatalf("%s: block %d night %d: usable %v, NewLookahead says %v", label, i, k, got.Usable(i, k), want.Usable(i, k))
				}
			}
		}
	}
	var c LookaheadCache
	want, err := NewLookahead(site, blocks, day, nights, step, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	got, err := c.Lookahead(site, blocks, day, nights, step, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	same("first call", got, want)
	first := c.Stats()
	if first.Misses != int64(len(blocks)*nights) || first.Hits != 0 {
		t.Fatalf("first call: %+v, want %d misses and no hits", first, len(blocks)*nights)
	}

	// A replan: the same blocks, some frames done since.
	again := append([]Block(nil), blocks...)
	for i := range again {
		if i%3 == 0 {
			again[i].FramesDone = again[i].FramesWanted - 1
		}
	}
	want, err = NewLookahead(site, again, day, nights, step, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	got, err = c.Lookahead(site, again, day, nights, step, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	same("after progress", got, want)
	if s := c.Stats(); s.Misses != first.Misses || s.Hits != int64(len(blocks)*nights) {
		t.Fatalf("replan: %+v, want no new misses and %d hits", s, len(blocks)*nights)
	}

	// One block's constraint set changes: only it is recomputed.
	set := *again[1].Set
	set.MinAltDeg += 10
	again[1].Set = &set
	got, err = c.Lookahead(site, again, day, nights, step, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	want, err = NewLookahead(site, again, day, nights, step, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	same("changed set", got, want)
	if s := c.Stats(); s.Misses != first.Misses+nights {
		t.Fatalf("changed set: %+v, want %d misses", s, first.Misses+nights)
	}

	// The bound holds: a later first night evicts the oldest.
	small := LookaheadCache{MaxNights: 3}
	for k := 0; k < 5; k++ {
		if _, err := small.Lookahead(site, blocks[:5], day.Add(time.Duration(k)*24*time.Hour), 1, step, 1, nil); err != nil {
			t.Fatal(err)
		}
	}
	if n := len(small.nights); n != 3 {
		t.Errorf("cache of at most 3 nights holds %d", n)
	}
}
