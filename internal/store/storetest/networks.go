package storetest

import (
	"fmt"
	"slices"
	"sync"
	"testing"

	"github.com/nightloom/nightloom/internal/store"
)

// ---- networks (migration 0008) ----

func testNetworks(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "a")
	site(t, db, "b")
	site(t, db, "c")
	target(t, db, "t")
	n, err := db.CreateNetwork(ctx, store.Network{ID: "n1", Name: "round the clock", SiteIDs: []string{"b", "a"}, Spec: []byte("n1")})
	noErr(t, "create network", err)
	if n.Revision != 1 || n.CreatedAt.IsZero() {
		t.Fatalf("created network %+v: want revision 1 and a creation time", n)
	}
	got, err := db.GetNetwork(ctx, "n1")
	noErr(t, "get network", err)
	if got.Name != n.Name || !slices.Equal(got.SiteIDs, []string{"b", "a"}) || string(got.Spec) != "n1" || !sameTime(got.CreatedAt, n.CreatedAt) {
		t.Fatalf("get network: got %+v, want %+v (members in the order given)", got, n)
	}
	_, err = db.CreateNetwork(ctx, store.Network{ID: "n2", Name: "round the clock", SiteIDs: []string{"a"}})
	wantErr(t, "a second network of the same name", err, store.ErrAlreadyExists)
	_, err = db.CreateNetwork(ctx, store.Network{ID: "n2", Name: "ghosts", SiteIDs: []string{"a", "nowhere"}})
	wantErr(t, "a network of an unknown site", err, store.ErrNotFound)
	_, err = db.CreateNetwork(ctx, store.Network{ID: "n2", Name: "twice", SiteIDs: []string{"a", "a"}})
	wantErr(t, "a site given twice", err, store.ErrInvalid)
	_, err = db.CreateNetwork(ctx, store.Network{ID: "n2", Name: "empty"})
	wantErr(t, "no sites", err, store.ErrInvalid)
	if _, err := db.GetNetwork(ctx, "n2"); err == nil {
		t.Fatal("a refused network was stored")
	}
	_, err = db.CreateNetwork(ctx, store.Network{ID: "n2", Name: "second", SiteIDs: []string{"c", "a"}})
	noErr(t, "create second network", err)
	list := pageAll(t, "list networks", 1, func(p store.Page) ([]store.Network, string, error) { return db.ListNetworks(ctx, p) })
	if len(list) != 2 || list[0].ID != "n1" || list[1].ID != "n2" || !slices.Equal(list[1].SiteIDs, []string{"c", "a"}) {
		t.Fatalf("list networks: %+v", list)
	}
	of, err := db.NetworksOfSite(ctx, "a")
	noErr(t, "networks of a", err)
	if !slices.Equal(of, []string{"n1", "n2"}) {
		t.Fatalf("networks of a: %v, want [n1 n2]", of)
	}

	// Blocks of a network: an unknown network is refused (and nothing of
	// the batch stored); a network's blocks are listed by network.
	nb := newBlock("nb", "a", "t", 5)
	nb.NetworkID = "n1"
	bad := newBlock("x", "a", "t", 5)
	bad.NetworkID = "nowhere"
	_, err = db.CreateBlocks(ctx, []store.Block{nb, bad})
	wantErr(t, "a block of an unknown network", err, store.ErrNotFound)
	if _, err := db.GetBlock(ctx, "nb"); err == nil {
		t.Fatal("the batch with a bad network was partly stored")
	}
	blocks(t, db, nb, newBlock("own", "a", "t", 5))
	b, err := db.GetBlock(ctx, "nb")
	noErr(t, "get network block", err)
	if b.NetworkID != "n1" || b.SiteID != "a" {
		t.Fatalf("network block read back as %+v", b)
	}
	if own, _ := db.GetBlock(ctx, "own"); own.NetworkID != "" {
		t.Fatalf("a site's block has network %q", own.NetworkID)
	}
	inNet := pageAll(t, "list network blocks", 10, func(p store.Page) ([]store.Block, string, error) {
		return db.ListBlocks(ctx, store.BlockFilter{NetworkID: "n1", State: store.StateQueued}, p)
	})
	if len(inNet) != 1 || inNet[0].ID != "nb" {
		t.Fatalf("blocks of n1: %v", ids(inNet, func(b store.Block) string { return b.ID }))
	}

	// Deleting: refused while a queued block belongs to it.
	wantErr(t, "delete a network with a queued block", db.DeleteNetwork(ctx, "n1"), store.ErrConflict)
	_, err = db.WithdrawBlock(ctx, "nb")
	noErr(t, "withdraw", err)
	noErr(t, "delete network", db.DeleteNetwork(ctx, "n1"))
	wantErr(t, "get deleted network", func() error { _, err := db.GetNetwork(ctx, "n1"); return err }(), store.ErrNotFound)
	wantErr(t, "delete again", db.DeleteNetwork(ctx, "n1"), store.ErrNotFound)
	if b, _ := db.GetBlock(ctx, "nb"); b.NetworkID != "" || b.SiteID != "a" {
		t.Fatalf("a withdrawn block of a deleted network: %+v, want its home site and no network", b)
	}
	noErr(t, "integrity", db.IntegrityCheck(ctx))
}

// testNetworkProgressTwoSites sends reports for one network block from two
// member sites at once: the frames are counted once per block (never beyond
// what it wants), and each site's reports are its own for replanning.
func testNetworkProgressTwoSites(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "east")
	site(t, db, "west")
	target(t, db, "t")
	_, err := db.CreateNetwork(ctx, store.Network{ID: "n", Name: "n", SiteIDs: []string{"east", "west"}})
	noErr(t, "create network", err)
	const wanted, perSite, each = 40, 12, 3 // 72 frames offered for 40 wanted
	b := newBlock("b", "east", "t", wanted)
	b.NetworkID = "n"
	blocks(t, db, b)
	var wg sync.WaitGroup
	errc := make(chan error, 4*perSite)
	start := make(chan struct{})
	for _, s := range []string{"east", "west"} {
		for i := range perSite {
			wg.Go(func() {
				<-start
				r := report(fmt.Sprintf("%s-%02d", s, i), "b", each)
				r.SiteID = s
				for try := range 2 {
					got, dup, err := db.ReportProgress(ctx, r)
					switch {
					case err != nil:
						errc <- err
					case got.FramesDone > wanted:
						errc <- fmt.Errorf("saw %d frames done of %d", got.FramesDone, wanted)
					case dup != (try == 1):
						errc <- fmt.Errorf("try %d of %s: duplicate %v", try, r.ReportID, dup)
					}
				}
			})
		}
	}
	close(start)
	wg.Wait()
	close(errc)
	for err := range errc {
		t.Fatal(err)
	}
	got, _ := db.GetBlock(ctx, "b")
	if got.FramesDone != wanted || got.State != store.StateCompleted {
		t.Fatalf("block after %d frames offered from two sites: %+v; want %d done, completed", 2*perSite*each, got, wanted)
	}
	for _, s := range []string{"east", "west"} {
		rs, err := db.ReportsEndingAfter(ctx, s, t0.Add(-1))
		noErr(t, "reports of "+s, err)
		if len(rs) != perSite {
			t.Fatalf("site %s sees %d reports, want its own %d", s, len(rs), perSite)
		}
		for _, r := range rs {
			if r.SiteID != s {
				t.Fatalf("site %s sees report %s of site %q", s, r.ReportID, r.SiteID)
			}
		}
	}
	noErr(t, "integrity (frames done = sum applied)", db.IntegrityCheck(ctx))
}
