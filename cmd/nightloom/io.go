package main

// Reading request files and writing responses: protojson in both
// directions (the canonical JSON mapping of the API messages), aligned
// tables, local and UTC times, and progress on a terminal.

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"text/tabwriter"
	"time"

	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// fileError is a request file that cannot be read or parsed. It exits with
// status 2, like a bad flag, and its message names the file and the field.
type fileError struct {
	path string
	err  error
}

func (e *fileError) Error() string { return fmt.Sprintf("file %s: %v", e.path, e.err) }

// readRequest parses a request file (protojson, canonical mapping; the
// original proto field names are accepted too) into m. Unknown fields are
// refused so that a misspelt field is not silently dropped.
func readRequest(path string, m proto.Message) error {
	data, err := readFileOrStdin(path)
	if err != nil {
		return &fileError{path, err}
	}
	return parseRequest(path, data, m)
}

func parseRequest(path string, data []byte, m proto.Message) error {
	if err := (protojson.UnmarshalOptions{}).Unmarshal(data, m); err != nil {
		// protojson's messages carry the line and column and the field;
		// drop its "proto:" prefix and the non-breaking space it uses to
		// keep callers from matching on its wording.
		msg := strings.ReplaceAll(err.Error(), "\u00a0", " ")
		msg = strings.TrimPrefix(msg, "proto: ")
		return &fileError{path, fmt.Errorf("not a valid %s: %s", m.ProtoReflect().Descriptor().Name(), msg)}
	}
	return nil
}

func readFileOrStdin(path string) ([]byte, error) {
	if path == "-" {
		return io.ReadAll(os.Stdin)
	}
	data, err := os.ReadFile(path)
	var pe *os.PathError
	if errors.As(err, &pe) {
		return nil, pe.Err // the path is already in the message
	}
	return data, err
}

// writeJSON prints one message in the canonical JSON mapping, indented.
func writeJSON(w io.Writer, m proto.Message) error {
	b, err := protojson.MarshalOptions{Multiline: true, Indent: "  "}.Marshal(m)
	if err != nil {
		return err
	}
	b = append(b, '\n')
	_, err = w.Write(b)
	return err
}

// writeJSONLine prints one message on one line (for streams).
func writeJSONLine(w io.Writer, m proto.Message) error {
	b, err := protojson.MarshalOptions{}.Marshal(m)
	if err != nil {
		return err
	}
	b = append(b, '\n')
	_, err = w.Write(b)
	return err
}

func newTable(w io.Writer) *tabwriter.Writer {
	return tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
}

// clock formats instants for one site: local time in the site's zone and
// UTC.
type clock struct {
	loc *time.Location
}

func newClock(zone string) clock {
	loc, err := time.LoadLocation(zone)
	if err != nil || zone == "" {
		loc = time.UTC
	}
	return clock{loc}
}

// hm is the local time of day, hh:mm.
func (c clock) hm(ts *timestamppb.Timestamp) string {
	if ts == nil {
		return "-"
	}
	return ts.AsTime().In(c.loc).Format("15:04")
}

// hmUTC is the UTC time of day, hh:mm.
func (c clock) hmUTC(ts *timestamppb.Timestamp) string {
	if ts == nil {
		return "-"
	}
	return ts.AsTime().UTC().Format("15:04")
}

// full is the local date and time with its zone abbreviation and the UTC
// time, e.g. "2027-01-14 22:05 CET (21:05 UTC)".
func (c clock) full(ts *timestamppb.Timestamp) string {
	if ts == nil {
		return "-"
	}
	t := ts.AsTime()
	l := t.In(c.loc)
	if c.loc == time.UTC {
		return t.UTC().Format("2006-01-02 15:04:05 UTC")
	}
	return l.Format("2006-01-02 15:04:05 MST") + t.UTC().Format(" (15:04:05 UTC)")
}

func (c clock) interval(iv *pb.TimeInterval) string {
	if iv == nil {
		return "-"
	}
	s, e := iv.GetStart().AsTime(), iv.GetEnd().AsTime()
	return fmt.Sprintf("%s to %s %s (%s to %s UTC)", s.In(c.loc).Format("2006-01-02 15:04"),
		e.In(c.loc).Format("2006-01-02 15:04"), s.In(c.loc).Format("MST"),
		s.UTC().Format("01-02 15:04"), e.UTC().Format("01-02 15:04"))
}

// dur prints a Duration compactly: 300s, 4m30s, 2h05m.
func dur(d *durationpb.Duration) string {
	if d == nil {
		return "0s"
	}
	return fmtDuration(d.AsDuration())
}

// fmtDuration prints a duration one way everywhere: whole seconds under a
// minute (48s, never 48.0s), tenths only under one second (0.2s), then
// minutes and seconds (4m30s), then hours and minutes (2h05m).
func fmtDuration(d time.Duration) string {
	switch {
	case d > 0 && d < 950*time.Millisecond:
		return fmt.Sprintf("%.1fs", d.Seconds())
	case d < time.Minute-500*time.Millisecond:
		return fmt.Sprintf("%ds", int64(d.Round(time.Second)/time.Second))
	case d < time.Hour:
		d = d.Round(time.Second)
		m, s := int(d/time.Minute), int(d%time.Minute/time.Second)
		if s == 0 {
			return fmt.Sprintf("%dm", m)
		}
		return fmt.Sprintf("%dm%02ds", m, s)
	default:
		d = d.Round(time.Minute)
		return fmt.Sprintf("%dh%02dm", int(d/time.Hour), int(d%time.Hour/time.Minute))
	}
}

func dateString(d *pb.LocalDate) string {
	if d == nil {
		return "-"
	}
	return fmt.Sprintf("%04d-%02d-%02d", d.GetYear(), d.GetMonth(), d.GetDay())
}

// enumName strips an enum value's type prefix and lower-cases it:
// REASON_BELOW_HORIZON_PROFILE -> below horizon profile.
func enumName(s, prefix string) string {
	s = strings.TrimPrefix(s, prefix)
	return strings.ToLower(strings.ReplaceAll(s, "_", " "))
}

// progress shows a line of progress on stderr while long work runs, only
// when stderr is a terminal; elsewhere (pipes, files, tests) it is silent.
type progress struct {
	w     io.Writer
	label string
	start time.Time
	mu    sync.Mutex
	note  string
	done  chan struct{}
	wg    sync.WaitGroup
}

// isTerminal reports whether w is a character device (a terminal).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	fi, err := f.Stat()
	return err == nil && fi.Mode()&os.ModeCharDevice != 0
}

// startProgress starts the display; Stop ends it and clears the line. It
// returns nil (whose methods do nothing) when w is not a terminal.
func startProgress(w io.Writer, label string) *progress {
	if !isTerminal(w) {
		return nil
	}
	p := &progress{w: w, label: label, start: time.Now(), done: make(chan struct{})}
	p.wg.Add(1)
	go func() {
		defer p.wg.Done()
		t := time.NewTicker(200 * time.Millisecond)
		defer t.Stop()
		for {
			select {
			case <-p.done:
				fmt.Fprint(p.w, "\r\033[K")
				return
			case <-t.C:
				p.mu.Lock()
				note := ""
				if p.note != "" {
					note = " " + p.note
				}
				fmt.Fprintf(p.w, "\r\033[K%s%s %.1f s", p.label, note, time.Since(p.start).Seconds())
				p.mu.Unlock()
			}
		}
	}()
	return p
}

// Set changes the note shown after the label (e.g. "500/1200 blocks").
func (p *progress) Set(format string, args ...any) {
	if p == nil {
		return
	}
	p.mu.Lock()
	p.note = fmt.Sprintf(format, args...)
	p.mu.Unlock()
}

func (p *progress) Stop() {
	if p == nil {
		return
	}
	close(p.done)
	p.wg.Wait()
}

// multiFlag is a repeatable string flag.
type multiFlag []string

func (m *multiFlag) String() string     { return strings.Join(*m, ",") }
func (m *multiFlag) Set(s string) error { *m = append(*m, s); return nil }

var _ flag.Value = (*multiFlag)(nil)

// parseInstant reads an RFC 3339 instant for a flag.
func parseInstant(flagName, s string) (*timestamppb.Timestamp, error) {
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return nil, flagError(flagName, "want an RFC 3339 instant (e.g. 2027-01-14T23:10:00Z), got %q", s)
	}
	return timestamppb.New(t), nil
}

// parseDate reads YYYY-MM-DD into a LocalDate for a flag.
func parseDate(flagName, s string) (*pb.LocalDate, error) {
	t, err := time.Parse("2006-01-02", s)
	if err != nil {
		return nil, flagError(flagName, "want YYYY-MM-DD, got %q", s)
	}
	return &pb.LocalDate{Year: int32(t.Year()), Month: int32(t.Month()), Day: int32(t.Day())}, nil
}

// parseClosure reads START/END[/REASON] or START/+DURATION[/REASON] (RFC
// 3339 instants, a Go duration such as 40m) for --closure.
func parseClosure(flagName, s string) (*pb.Closure, error) {
	parts := strings.SplitN(s, "/", 3)
	if len(parts) < 2 {
		return nil, flagError(flagName, "want START/END[/REASON] or START/+DURATION[/REASON], got %q", s)
	}
	start, err := time.Parse(time.RFC3339Nano, parts[0])
	if err != nil {
		return nil, flagError(flagName, "closure start: want an RFC 3339 instant, got %q", parts[0])
	}
	var end time.Time
	if d, ok := strings.CutPrefix(parts[1], "+"); ok {
		dd, err := time.ParseDuration(d)
		if err != nil {
			return nil, flagError(flagName, "closure length: want a duration such as 40m, got %q", d)
		}
		end = start.Add(dd)
	} else if end, err = time.Parse(time.RFC3339Nano, parts[1]); err != nil {
		return nil, flagError(flagName, "closure end: want an RFC 3339 instant or +DURATION, got %q", parts[1])
	}
	if !end.After(start) {
		return nil, flagError(flagName, "closure %q does not end after it starts", s)
	}
	c := &pb.Closure{Interval: &pb.TimeInterval{Start: timestamppb.New(start), End: timestamppb.New(end)}}
	if len(parts) == 3 {
		c.Reason = parts[2]
	}
	return c, nil
}
