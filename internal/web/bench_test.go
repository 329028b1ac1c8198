package web

import (
	"net/http"
	"testing"
)

// BenchmarkNightPage renders the demo night's page (store reads, Night,
// the chart as SVG, the template) as a live page's refetch does, with one
// plan version and with 20 (19 replans).
func BenchmarkNightPage(b *testing.B) {
	e := newEnv(b)
	e.loadDemo(nil)
	c := e.client()
	e.signIn(c, e.viewer).Body.Close()
	u := e.http.URL + "/sites/" + e.site.GetId() + "?fragment=1"
	run := func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			resp, err := c.Get(u)
			if err != nil {
				b.Fatal(err)
			}
			n := len(readAll(b, resp))
			if resp.StatusCode != http.StatusOK || n == 0 {
				b.Fatalf("status %d, %d bytes", resp.StatusCode, n)
			}
		}
	}
	b.Run("versions=1", run)
	for i := 0; i < 19; i++ {
		e.replanDemo(b, i)
	}
	b.Run("versions=20", run)
}
