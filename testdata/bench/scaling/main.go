// Command scaling turns the output of scheduler.BenchmarkScaling and
// scheduler.BenchmarkScalingSites into the README's scaling tables
// (markdown) and chart (PNG, gonum/plot): planning time and memory against
// the number of blocks, one line per horizon, and planning time against
// the number of sites of a network.
//
//	go test -run '^$' -bench '^BenchmarkScaling(Sites)?$' -benchtime 1x ./scheduler/ |
//	    go run ./testdata/bench/scaling -md docs/scaling.md -png docs/scaling.png
//
// testdata/bench/scaling.sh runs both.
package main

import (
	"bufio"
	"flag"
	"fmt"
	"image/color"
	"io"
	"os"
	"regexp"
	"sort"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// row is one sub-benchmark's figures.
type row struct {
	sites          int // 0: BenchmarkScaling (one site); else BenchmarkScalingSites
	blocks, nights int
	wallS, cpuS    float64
	allocMB        float64
	keptMB         float64
	kbPerBN        float64
	objective      float64
	boundRatio     float64 // 0: not measured
	jointRatio     float64 // joint / separate (networks)
}

var (
	nameRE = regexp.MustCompile(`^BenchmarkScaling/blocks=(\d+)/nights=(\d+)(-\d+)?$`)
	netRE  = regexp.MustCompile(`^BenchmarkScalingSites/sites=(\d+)/blocks=(\d+)(-\d+)?$`)
)

func parse(r io.Reader) ([]row, string, error) {
	var rows []row
	var cpuLine string
	sc := bufio.NewScanner(r)
	for sc.Scan() {
		f := strings.Fields(sc.Text())
		if len(f) > 0 && f[0] == "cpu:" {
			cpuLine = strings.TrimSpace(strings.TrimPrefix(sc.Text(), "cpu:"))
		}
		if len(f) < 4 {
			continue
		}
		var x row
		if m := nameRE.FindStringSubmatch(f[0]); m != nil {
			x.blocks, _ = strconv.Atoi(m[1])
			x.nights, _ = strconv.Atoi(m[2])
		} else if m := netRE.FindStringSubmatch(f[0]); m != nil {
			x.sites, _ = strconv.Atoi(m[1])
			x.blocks, _ = strconv.Atoi(m[2])
			x.nights = 1
		} else {
			continue
		}
		for i := 2; i+1 < len(f); i += 2 {
			v, err := strconv.ParseFloat(f[i], 64)
			if err != nil {
				return nil, "", fmt.Errorf("%s: %q: %v", f[0], f[i], err)
			}
			switch f[i+1] {
			case "ns/op":
				x.wallS = v / 1e9
			case "cpu-ms/op":
				x.cpuS = v / 1e3
			case "MB-alloc":
				x.allocMB = v
			case "MB-kept":
				x.keptMB = v
			case "KB-kept/block-night":
				x.kbPerBN = v
			case "objective":
				x.objective = v
			case "bound-ratio":
				x.boundRatio = v
			case "joint/separate":
				x.jointRatio = v
			}
		}
		rows = append(rows, x)
	}
	sort.Slice(rows, func(i, j int) bool {
		if rows[i].sites != rows[j].sites {
			return rows[i].sites < rows[j].sites
		}
		if rows[i].nights != rows[j].nights {
			return rows[i].nights < rows[j].nights
		}
		return rows[i].blocks < rows[j].blocks
	})
	return rows, cpuLine, sc.Err()
}

func markdown(w io.Writer, rows []row, cpu string) {
	fmt.Fprintf(w, "| blocks | nights | wall s | CPU s | MB allocated | MB kept | KB kept per block-night | objective | objective / upper bound |\n")
	fmt.Fprintf(w, "| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |\n")
	ratio := func(r float64) string {
		if r > 0 {
			return fmt.Sprintf("%.3f", r)
		}
		return "-"
	}
	var net []row
	for _, x := range rows {
		if x.sites > 0 {
			net = append(net, x)
			continue
		}
		fmt.Fprintf(w, "| %d | %d | %.2f | %.2f | %.0f | %.0f | %.1f | %.0f | %s |\n", x.blocks, x.nights, x.wallS, x.cpuS,
			x.allocMB, x.keptMB, x.kbPerBN, x.objective, ratio(x.boundRatio))
	}
	if len(net) > 0 {
		fmt.Fprintf(w, "\nNetworks (`BenchmarkScalingSites`: SolveNetwork, 200 blocks per site, one night):\n\n")
		fmt.Fprintf(w, "| sites | blocks | wall s | CPU s | MB allocated | MB kept | KB kept per block | objective | joint / separate | objective / network bound |\n")
		fmt.Fprintf(w, "| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |\n")
		for _, x := range net {
			fmt.Fprintf(w, "| %d | %d | %.2f | %.2f | %.0f | %.0f | %.1f | %.0f | %s | %s |\n", x.sites, x.blocks, x.wallS, x.cpuS,
				x.allocMB, x.keptMB, x.kbPerBN, x.objective, ratio(x.jointRatio), ratio(x.boundRatio))
		}
	}
	if cpu != "" {
		fmt.Fprintf(w, "\nMeasured on: %s (`go test -bench '^BenchmarkScaling(Sites)?$' -benchtime 1x ./scheduler/`).\n", cpu)
	}
}

var lineColors = []color.Color{
	color.RGBA{0x1f, 0x5f, 0xa8, 0xff}, color.RGBA{0xd0, 0x6a, 0x10, 0xff}, color.RGBA{0x2a, 0x8a, 0x3a, 0xff},
	color.RGBA{0x8a, 0x2a, 0x8a, 0xff},
}

// panel draws one quantity against blocks, a line per horizon, log-log.
func panel(rows []row, title, ylabel string, y func(row) float64) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = "blocks"
	p.Y.Label.Text = ylabel
	p.X.Scale, p.Y.Scale = plot.LogScale{}, plot.LogScale{}
	p.X.Tick.Marker, p.Y.Tick.Marker = plot.LogTicks{Prec: -1}, plot.LogTicks{Prec: -1}
	p.Add(plotter.NewGrid())
	var nights []int
	for _, x := range rows {
		if x.sites > 0 {
			continue
		}
		if len(nights) == 0 || nights[len(nights)-1] != x.nights {
			nights = append(nights, x.nights)
		}
	}
	for k, n := range nights {
		var xy plotter.XYs
		for _, x := range rows {
			if x.sites == 0 && x.nights == n && y(x) > 0 {
				xy = append(xy, plotter.XY{X: float64(x.blocks), Y: y(x)})
			}
		}
		if len(xy) == 0 {
			continue
		}
		l, s, err := plotter.NewLinePoints(xy)
		if err != nil {
			return nil, err
		}
		c := lineColors[k%len(lineColors)]
		l.Color, s.Color = c, c
		l.Width = vg.Points(1.5)
		s.Shape = draw.CircleGlyph{}
		p.Add(l, s)
		label := fmt.Sprintf("%d nights", n)
		if n == 1 {
			label = "1 night"
		}
		p.Legend.Add(label, l, s)
	}
	p.Legend.Top, p.Legend.Left = true, true
	return p, nil
}

// sitesPanel draws the networks' CPU time against the number of sites.
func sitesPanel(rows []row) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = "networks (200 blocks per site)"
	p.X.Label.Text = "sites"
	p.Y.Label.Text = "CPU seconds"
	p.Add(plotter.NewGrid())
	var xy plotter.XYs
	for _, x := range rows {
		if x.sites > 0 && x.cpuS > 0 {
			xy = append(xy, plotter.XY{X: float64(x.sites), Y: x.cpuS})
		}
	}
	if len(xy) == 0 {
		return nil, nil
	}
	l, s, err := plotter.NewLinePoints(xy)
	if err != nil {
		return nil, err
	}
	l.Color, s.Color = lineColors[0], lineColors[0]
	l.Width = vg.Points(1.5)
	s.Shape = draw.CircleGlyph{}
	p.Add(l, s)
	p.Legend.Add("1 night", l, s)
	p.Legend.Top, p.Legend.Left = true, true
	return p, nil
}

func chart(path string, rows []row) error {
	cpu, err := panel(rows, "planning time", "CPU seconds", func(x row) float64 { return x.cpuS })
	if err != nil {
		return err
	}
	mem, err := panel(rows, "memory kept by the plans", "MB", func(x row) float64 { return x.keptMB })
	if err != nil {
		return err
	}
	net, err := sitesPanel(rows)
	if err != nil {
		return err
	}
	plots := []*plot.Plot{cpu, mem}
	if net != nil {
		plots = append(plots, net)
	}
	w, h := vg.Length(len(plots))*4.5*vg.Inch, 4*vg.Inch
	c := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(110), vgimg.UseBackgroundColor(color.White))
	dc := draw.New(c)
	tiles := draw.Tiles{Rows: 1, Cols: len(plots), PadX: vg.Points(12), PadY: vg.Points(6), PadLeft: vg.Points(6), PadRight: vg.Points(6),
		PadTop: vg.Points(6), PadBottom: vg.Points(6)}
	cvs := plot.Align([][]*plot.Plot{plots}, tiles, dc)
	for k, pl := range plots {
		pl.Draw(cvs[0][k])
	}
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(f); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

func main() {
	md := flag.String("md", "", "write the markdown table here (default stdout)")
	png := flag.String("png", "", "write the chart here (PNG)")
	flag.Parse()
	rows, cpu, err := parse(os.Stdin)
	if err == nil && len(rows) == 0 {
		err = fmt.Errorf("no BenchmarkScaling or BenchmarkScalingSites lines on stdin")
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "scaling:", err)
		os.Exit(1)
	}
	out := io.Writer(os.Stdout)
	if *md != "" {
		f, err := os.Create(*md)
		if err != nil {
			fmt.Fprintln(os.Stderr, "scaling:", err)
			os.Exit(1)
		}
		defer f.Close()
		out = f
	}
	markdown(out, rows, cpu)
	if *png != "" {
		if err := chart(*png, rows); err != nil {
			fmt.Fprintln(os.Stderr, "scaling:", err)
			os.Exit(1)
		}
	}
}
