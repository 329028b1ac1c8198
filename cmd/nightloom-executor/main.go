// Command nightloom-executor runs a site's plan on INDI devices: it stands
// beside the mount, camera, filter wheel, focuser, dome and weather station
// of one site, asks nightloomd for the next run (NextAssignment), checks it
// against the Sun and the horizon with its own ephemerides, drives the
// devices over an INDI server, writes each frame as a FITS file with the
// standard keywords in a folder per night, reports every run once
// (ReportProgress, with a report id derived from the assignment), and
// closes, parks and replans around bad weather and at dawn.
//
// It holds a token of role telescope. Unattended equipment can hurt people
// and itself: see the README's cautions; the site's own safety systems and
// local codes come first.
//
// Usage:
//
//	nightloom-executor --server 127.0.0.1:7878 --site SITE_ID --indi 127.0.0.1:7624 \
//	    --filters L=8,R=1,G=2,B=3 --out /data/frames
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"

	"github.com/nightloom/nightloom/internal/indi"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

const envToken = "NIGHTLOOM_TOKEN"

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	os.Exit(run(ctx, os.Args[1:], os.Stdout, os.Stderr))
}

// options are the parsed flags.
type options struct {
	server, token, tlsCA, siteID, indiAddr string
	names                                  deviceNames
	filters                                map[string]int
	out, metricsListen, summaryJSON        string
	dryRun                                 bool
	cfg                                    config
}

type flagError struct{ flag, msg string }

func (e *flagError) Error() string { return "--" + e.flag + ": " + e.msg }

func parseFlags(args []string, stderr io.Writer) (*options, error) {
	o := &options{}
	fs := flag.NewFlagSet("nightloom-executor", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.StringVar(&o.server, "server", "127.0.0.1:7878", "nightloomd address host:port")
	fs.StringVar(&o.token, "token", "", "token of role telescope (default: env "+envToken+")")
	fs.StringVar(&o.tlsCA, "tls-ca", "", "PEM file of the CA that signed the daemon's certificate; turns TLS on")
	fs.StringVar(&o.siteID, "site", "", "id of the site this executor runs (required)")
	fs.StringVar(&o.indiAddr, "indi", "127.0.0.1:7624", "INDI server address host:port")
	fs.StringVar(&o.names.mount, "mount", "Telescope Simulator", "INDI device name of the mount (required)")
	fs.StringVar(&o.names.ccd, "ccd", "CCD Simulator", "INDI device name of the camera (required)")
	fs.StringVar(&o.names.wheel, "wheel", "Filter Simulator", "INDI device name of the filter wheel (empty: none)")
	fs.StringVar(&o.names.focuser, "focuser", "Focuser Simulator", "INDI device name of the focuser (empty: none)")
	fs.StringVar(&o.names.dome, "dome", "Dome Simulator", "INDI device name of the dome or roof (empty: none)")
	fs.StringVar(&o.names.weather, "weather", "Weather Simulator", "INDI device name of the weather station (empty: none, never safe to leave unattended)")
	filters := fs.String("filters", "", "our filter names to wheel slots, e.g. L=8,R=1,G=2,B=3")
	fs.StringVar(&o.out, "out", "", "folder for the frames (a sub-folder per night) and the run journal (required)")
	fs.BoolVar(&o.dryRun, "dry-run", false, "read the devices and log what would be done; move nothing, report nothing")
	fs.StringVar(&o.metricsListen, "metrics-listen", "", "address for Prometheus metrics at /metrics (empty: off)")
	fs.StringVar(&o.summaryJSON, "summary-json", "", "file to write the night's run figures to as JSON at exit")
	fs.DurationVar(&o.cfg.poll, "poll", 15*time.Second, "wait between questions when there is nothing to do")
	fs.DurationVar(&o.cfg.weatherOKFor, "weather-ok-for", 10*time.Minute, "the weather must be safe this long before reopening")
	fs.Float64Var(&o.cfg.parkSunAltDeg, "park-sun-alt-deg", -6, "park and close when the Sun is above this altitude (deg)")
	fs.Float64Var(&o.cfg.focusSteps, "focus-steps", 500, "focuser steps out and back in a focus run")
	fs.DurationVar(&o.cfg.blobTimeout, "readout-timeout", time.Minute, "time allowed beyond the exposure for readout and download")
	fs.DurationVar(&o.cfg.callTimeout, "timeout", 30*time.Second, "deadline of each call to the daemon")
	if err := fs.Parse(args); err != nil {
		return nil, err
	}
	if fs.NArg() > 0 {
		return nil, fmt.Errorf("unexpected arguments %q", fs.Args())
	}
	if o.token == "" {
		o.token = os.Getenv(envToken)
	}
	switch {
	case o.siteID == "":
		return nil, &flagError{"site", "required"}
	case o.out == "":
		return nil, &flagError{"out", "required"}
	case o.names.mount == "":
		return nil, &flagError{"mount", "required"}
	case o.names.ccd == "":
		return nil, &flagError{"ccd", "required"}
	case strings.ContainsAny(o.token, " \t\r\n"):
		return nil, &flagError{"token", "must not contain white space"}
	case o.cfg.poll < time.Second:
		return nil, &flagError{"poll", "at least 1s"}
	case o.cfg.weatherOKFor < 0:
		return nil, &flagError{"weather-ok-for", "must not be negative"}
	case !(o.cfg.parkSunAltDeg >= -18 && o.cfg.parkSunAltDeg <= 0):
		return nil, &flagError{"park-sun-alt-deg", "must be in [-18, 0]"}
	case o.cfg.focusSteps < 0:
		return nil, &flagError{"focus-steps", "must not be negative"}
	}
	for _, a := range []struct{ flag, v string }{{"server", o.server}, {"indi", o.indiAddr}} {
		if h, p, err := net.SplitHostPort(a.v); err != nil || h == "" || p == "" {
			return nil, &flagError{a.flag, fmt.Sprintf("want host:port, got %q", a.v)}
		}
	}
	var err error
	if o.filters, err = parseFilters(*filters); err != nil {
		return nil, &flagError{"filters", err.Error()}
	}
	o.cfg.siteID, o.cfg.out, o.cfg.dryRun = o.siteID, o.out, o.dryRun
	return o, nil
}

// parseFilters reads NAME=SLOT pairs separated by commas.
func parseFilters(s string) (map[string]int, error) {
	m := map[string]int{}
	if strings.TrimSpace(s) == "" {
		return m, nil
	}
	slots := map[int]string{}
	for _, part := range strings.Split(s, ",") {
		name, slot, ok := strings.Cut(strings.TrimSpace(part), "=")
		n, err := strconv.Atoi(strings.TrimSpace(slot))
		name = strings.TrimSpace(name)
		if !ok || name == "" || err != nil || n < 1 {
			return nil, fmt.Errorf("want NAME=SLOT (slot >= 1), got %q", part)
		}
		if _, dup := m[name]; dup {
			return nil, fmt.Errorf("filter %q given twice", name)
		}
		if other, dup := slots[n]; dup {
			return nil, fmt.Errorf("slot %d given to %q and %q", n, other, name)
		}
		m[name], slots[n] = n, name
	}
	return m, nil
}

type bearer string

func (b bearer) GetRequestMetadata(context.Context, ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + string(b)}, nil
}

func (bearer) RequireTransportSecurity() bool { return false }

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	o, err := parseFlags(args, stderr)
	if errors.Is(err, flag.ErrHelp) {
		return 0
	}
	if err != nil {
		fmt.Fprintln(stderr, "nightloom-executor:", err)
		return 2
	}
	log := slog.New(slog.NewTextHandler(stderr, nil))
	if err := execute(ctx, o, log, stdout); err != nil {
		fmt.Fprintln(stderr, "nightloom-executor:", err)
		return 1
	}
	return 0
}

func execute(ctx context.Context, o *options, log *slog.Logger, stdout io.Writer) error {
	var dial []grpc.DialOption
	if o.tlsCA != "" {
		creds, err := credentials.NewClientTLSFromFile(o.tlsCA, "")
		if err != nil {
			return &flagError{"tls-ca", err.Error()}
		}
		dial = append(dial, grpc.WithTransportCredentials(creds))
	} else {
		dial = append(dial, grpc.WithTransportCredentials(insecure.NewCredentials()))
	}
	if o.token != "" {
		dial = append(dial, grpc.WithPerRPCCredentials(bearer(o.token)))
	}
	cc, err := grpc.NewClient(o.server, dial...)
	if err != nil {
		return &flagError{"server", err.Error()}
	}
	defer cc.Close()
	sites := pb.NewSiteServiceClient(cc)
	sctx, cancel := context.WithTimeout(ctx, o.cfg.callTimeout)
	sresp, err := sites.GetSite(sctx, &pb.GetSiteRequest{SiteId: o.siteID})
	cancel()
	if err != nil {
		return fmt.Errorf("reading site %s: %w", o.siteID, err)
	}
	site := sresp.GetSite()
	sky, err := newSiteSky(site)
	if err != nil {
		return fmt.Errorf("site %s: %w", o.siteID, err)
	}
	for _, f := range site.GetInstrument().GetFilters() {
		if _, ok := o.filters[f]; !ok && o.names.wheel != "" {
			log.Warn("a filter of the site has no wheel slot in --filters", "filter", f)
		}
	}

	ictx, cancel := context.WithTimeout(ctx, time.Minute)
	defer cancel()
	ic, err := indi.Dial(ictx, o.indiAddr, indi.Options{Reconnect: &indi.Backoff{Initial: time.Second, Max: 30 * time.Second}})
	if err != nil {
		return &flagError{"indi", err.Error()}
	}
	defer ic.Close()
	dev := &devices{c: ic, names: o.names, dryRun: o.dryRun, log: log, slots: o.filters}
	if err := dev.connect(ictx); err != nil {
		return err
	}
	if err := dev.setSite(ictx, site.GetLatitudeDeg(), site.GetLongitudeDeg(), site.GetElevationM()); err != nil {
		return fmt.Errorf("telling the mount its site: %w", err)
	}
	j, err := openJournal(filepath.Join(o.out, "journal"))
	if err != nil {
		return &flagError{"out", err.Error()}
	}
	m := newMetrics()
	if o.metricsListen != "" {
		ln, err := net.Listen("tcp", o.metricsListen)
		if err != nil {
			return &flagError{"metrics-listen", err.Error()}
		}
		mux := http.NewServeMux()
		mux.Handle("GET /metrics", promhttp.HandlerFor(m.reg, promhttp.HandlerOpts{}))
		hs := &http.Server{Handler: mux, ReadHeaderTimeout: 10 * time.Second}
		go hs.Serve(ln)
		defer hs.Close()
		log.Info("metrics", "addr", ln.Addr().String())
	}
	e := &executor{cfg: o.cfg, plans: pb.NewPlanServiceClient(cc), queue: pb.NewQueueServiceClient(cc), site: site, sky: sky,
		dev: dev, j: j, m: m, log: log, now: func() time.Time { return time.Now().UTC() }, refused: map[string]time.Time{}}
	log.Info("executor started", "site", site.GetName(), "dry_run", o.dryRun, "solar_floor_deg", sky.floorDeg)
	err = e.run(ctx)
	m.summary(stdout)
	if o.summaryJSON != "" {
		f, ferr := os.Create(o.summaryJSON)
		if ferr == nil {
			ferr = m.writeJSON(f)
			if cerr := f.Close(); ferr == nil {
				ferr = cerr
			}
		}
		if ferr != nil {
			log.Error("writing the summary", "err", ferr)
		}
	}
	return err
}
