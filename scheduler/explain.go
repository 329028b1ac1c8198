package scheduler

import (
	"fmt"
	"strings"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// WhyNot lists why block b cannot be observed, span by span of the grid,
// with instants formatted by clock (e.g. local "15:04"): "Moon too close
// 23:10-01:40; below the horizon profile 01:40-05:02" (at most six spans).
func (p *Problem) WhyNot(b int, clock func(time.Time) string) string {
	var parts []string
	for _, sp := range p.Vis[b].Spans(p.Grid) {
		if sp.Reason == constraints.OK {
			continue
		}
		if len(parts) == 6 {
			parts = append(parts, "...")
			break
		}
		parts = append(parts, fmt.Sprintf("%s %s-%s", sp.Reason, clock(sp.From), clock(sp.To)))
	}
	return strings.Join(parts, "; ")
}

// ObservableText lists block b's observable intervals from the plan's
// start on, closures taken out (at most four), with instants formatted by
// clock: "19:07-00:22, 00:24-02:22".
func (p *Problem) ObservableText(b int, clock func(time.Time) string) string {
	d := &p.bd[b]
	var parts []string
	for k := 0; k < len(d.iv); k += 2 {
		s, e := d.iv[k], d.iv[k+1]
		if e <= p.tFrom {
			continue
		}
		if len(parts) == 4 {
			parts = append(parts, "...")
			break
		}
		parts = append(parts, clock(p.abs(max(s, p.tFrom)))+"-"+clock(p.abs(e)))
	}
	if len(parts) == 0 {
		return "at no time"
	}
	return strings.Join(parts, ", ")
}
