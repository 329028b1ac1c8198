package indi

import (
	"bufio"
	"bytes"
	"compress/zlib"
	"context"
	"encoding/base64"
	"errors"
	"math"
	"net"
	"strings"
	"testing"
	"time"
)

// The fragments below were recorded from indiserver 1.9.9 (Debian's
// indi-bin) with its telescope and CCD simulators, then trimmed; they follow
// the element grammar of the INDI protocol 1.7 description.
const (
	defCoord = `<defNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD" label="Eq. Coordinates" group="Main Control" state="Idle" perm="rw" timeout="60" timestamp="2026-12-04T17:36:18">
    <defNumber name="RA" label="RA (hh:mm:ss)" format="%010.6m" min="0" max="24" step="0">
16.509174345669915596
    </defNumber>
    <defNumber name="DEC" label="DEC (dd:mm:ss)" format="%010.6m" min="-90" max="90" step="0">
90
    </defNumber>
</defNumberVector>
`
	defPark = `<defSwitchVector device="Telescope Simulator" name="TELESCOPE_PARK" label="Parking" group="Main Control" state="Ok" perm="rw" rule="OneOfMany" timeout="60" timestamp="2026-12-04T17:36:18">
    <defSwitch name="PARK" label="Park(ed)">
Off
    </defSwitch>
    <defSwitch name="UNPARK" label="UnPark(ed)">
On
    </defSwitch>
</defSwitchVector>
`
	defWeather = `<defLightVector device="Weather Simulator" name="WEATHER_STATUS" label="Status" group="Main Control" state="Ok" timestamp="2026-12-04T17:36:20">
    <defLight name="WEATHER_FORECAST" label="Weather">
Ok
    </defLight>
</defLightVector>
`
)

// fakePeer is an in-process INDI server: it accepts connections, records
// what clients send and lets the test write to the current connection.
type fakePeer struct {
	ln    net.Listener
	conns chan net.Conn
	lines chan string // lines received from the client
}

func newFakePeer(t *testing.T) *fakePeer {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	f := &fakePeer{ln: ln, conns: make(chan net.Conn, 4), lines: make(chan string, 256)}
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			f.conns <- c
			go func() {
				sc := bufio.NewScanner(c)
				for sc.Scan() {
					f.lines <- sc.Text()
				}
			}()
		}
	}()
	t.Cleanup(func() { ln.Close() })
	return f
}

func (f *fakePeer) accept(t *testing.T) net.Conn {
	t.Helper()
	select {
	case c := <-f.conns:
		t.Cleanup(func() { c.Close() })
		return c
	case <-time.After(5 * time.Second):
		t.Fatal("no connection")
	}
	return nil
}

// expect waits for a received line containing want.
func (f *fakePeer) expect(t *testing.T, want string) {
	t.Helper()
	deadline := time.After(5 * time.Second)
	for {
		select {
		case l := <-f.lines:
			if strings.Contains(l, want) {
				return
			}
		case <-deadline:
			t.Fatalf("the client never sent %q", want)
		}
	}
}

func write(t *testing.T, c net.Conn, s string) {
	t.Helper()
	if _, err := c.Write([]byte(s)); err != nil {
		t.Fatal(err)
	}
}

func TestDefineSetAndWait(t *testing.T) {
	f := newFakePeer(t)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c, err := Dial(ctx, f.ln.Addr().String(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	conn := f.accept(t)
	if err := c.GetProperties("", ""); err != nil {
		t.Fatal(err)
	}
	f.expect(t, `<getProperties version="1.7"/>`)
	write(t, conn, defCoord+defPark+defWeather)
	p, err := c.Wait(ctx, "Telescope Simulator", "EQUATORIAL_EOD_COORD", nil)
	if err != nil {
		t.Fatal(err)
	}
	if p.Kind != Number || p.State != Idle || p.Perm != "rw" || p.Timeout != time.Minute {
		t.Errorf("defined %+v", p)
	}
	if got := p.Num("RA"); math.Abs(got-16.509174345669915596) > 1e-12 {
		t.Errorf("RA = %v", got)
	}
	if want := time.Date(2026, 12, 4, 17, 36, 18, 0, time.UTC); !p.Timestamp.Equal(want) {
		t.Errorf("timestamp %v, want %v", p.Timestamp, want)
	}
	w, err := c.Wait(ctx, "Weather Simulator", "WEATHER_STATUS", nil)
	if err != nil || w.Kind != Light || w.Elements[0].Light != Ok {
		t.Fatalf("weather %+v %v", w, err)
	}

	// A slew: the driver answers Busy with intermediate places, then Ok.
	done := make(chan error, 1)
	var got Property
	go func() {
		var err error
		got, err = c.SetAndWait(ctx, Number, "Telescope Simulator", "EQUATORIAL_EOD_COORD",
			Value{Name: "RA", Number: 5.5}, Value{Name: "DEC", Number: -20.25})
		done <- err
	}()
	f.expect(t, `<newNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD"`)
	// A periodic Ok update sent before the driver saw the request must not
	// end the wait: its values do not show the request.
	write(t, conn, `<setNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD" state="Ok" timeout="60" timestamp="2026-12-04T17:40:00"><oneNumber name="RA">16.5</oneNumber><oneNumber name="DEC">90</oneNumber></setNumberVector>`)
	write(t, conn, `<setNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD" state="Busy" timeout="60" timestamp="2026-12-04T17:40:01"><oneNumber name="RA">10:00:00</oneNumber><oneNumber name="DEC">40</oneNumber></setNumberVector>`)
	select {
	case err := <-done:
		t.Fatalf("SetAndWait returned during the slew: %v", err)
	case <-time.After(100 * time.Millisecond):
	}
	write(t, conn, `<setNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD" state="Ok" timeout="60" timestamp="2026-12-04T17:40:09"><oneNumber name="RA">5:30:00</oneNumber><oneNumber name="DEC">-20:15:00</oneNumber></setNumberVector>`)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if got.State != Ok || got.Num("RA") != 5.5 || got.Num("DEC") != -20.25 {
		t.Errorf("after the slew %+v", got)
	}

	// An Alert answer is an error carrying the driver's message.
	go func() {
		_, err := c.SetAndWait(ctx, Switch, "Telescope Simulator", "TELESCOPE_PARK", Value{Name: "PARK", On: true}, Value{Name: "UNPARK"})
		done <- err
	}()
	f.expect(t, `<oneSwitch name="PARK">On</oneSwitch>`)
	write(t, conn, `<setSwitchVector device="Telescope Simulator" name="TELESCOPE_PARK" state="Alert" timestamp="2026-12-04T17:41:00" message="Parking failed"><oneSwitch name="PARK">Off</oneSwitch></setSwitchVector>`)
	if err := <-done; !errors.Is(err, ErrAlert) || !strings.Contains(err.Error(), "Parking failed") {
		t.Errorf("park answered Alert: err %v, want ErrAlert with the message", err)
	}

	// delProperty removes it; Wait then ends at the deadline.
	write(t, conn, `<delProperty device="Telescope Simulator" name="TELESCOPE_PARK" timestamp="2026-12-04T17:42:00"/>`)
	for deadline := time.Now().Add(5 * time.Second); ; time.Sleep(5 * time.Millisecond) {
		if _, ok := c.Property("Telescope Simulator", "TELESCOPE_PARK"); !ok {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("delProperty ignored")
		}
	}
	sctx, scancel := context.WithTimeout(ctx, 200*time.Millisecond)
	defer scancel()
	if _, err := c.Wait(sctx, "Telescope Simulator", "TELESCOPE_PARK", nil); !errors.Is(err, context.DeadlineExceeded) {
		t.Errorf("after delProperty: %v, want a deadline error", err)
	}
}

func TestBLOBAndMessages(t *testing.T) {
	f := newFakePeer(t)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c, err := Dial(ctx, f.ln.Addr().String(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	conn := f.accept(t)
	events, stop := c.Subscribe(16)
	defer stop()
	if err := c.EnableBLOB("CCD Simulator", "", BLOBAlso); err != nil {
		t.Fatal(err)
	}
	f.expect(t, `<enableBLOB device="CCD Simulator">Also</enableBLOB>`)
	payload := bytes.Repeat([]byte("SIMPLE  =                    T "), 100)
	enc := base64.StdEncoding.EncodeToString(payload)
	// base64 broken into lines, as drivers send it.
	var lines strings.Builder
	for i := 0; i < len(enc); i += 72 {
		lines.WriteString(enc[i:min(i+72, len(enc))] + "\n")
	}
	var z bytes.Buffer
	zw := zlib.NewWriter(&z)
	zw.Write(payload)
	zw.Close()
	write(t, conn, `<defBLOBVector device="CCD Simulator" name="CCD1" label="Image Data" group="Image Info" state="Idle" perm="ro" timeout="60" timestamp="2026-12-04T17:37:00"><defBLOB name="CCD1" label="Image"/></defBLOBVector>`)
	write(t, conn, `<message device="CCD Simulator" timestamp="2026-12-04T17:37:00" message="Exposure done, downloading image..."/>`)
	write(t, conn, `<setBLOBVector device="CCD Simulator" name="CCD1" state="Ok" timeout="60" timestamp="2026-12-04T17:37:01"><oneBLOB name="CCD1" size="3100" format=".fits" len="3100">`+"\n"+lines.String()+`</oneBLOB></setBLOBVector>`)
	write(t, conn, `<setBLOBVector device="CCD Simulator" name="CCD1" state="Ok" timeout="60" timestamp="2026-12-04T17:37:02"><oneBLOB name="CCD1" size="3100" format=".fits.z">`+base64.StdEncoding.EncodeToString(z.Bytes())+`</oneBLOB></setBLOBVector>`)
	var blobs, messages int
	for blobs < 2 {
		select {
		case ev := <-events:
			switch {
			case ev.Kind == EventMessage:
				messages++
				if ev.Message != "Exposure done, downloading image..." {
					t.Errorf("message %q", ev.Message)
				}
			case ev.Kind == EventSet && ev.Name == "CCD1":
				blobs++
				e, _ := ev.Property.Element("CCD1")
				if !bytes.Equal(e.Data, payload) || e.BLOBFormat != ".fits" {
					t.Errorf("BLOB %d: %d bytes format %q, want %d bytes .fits", blobs, len(e.Data), e.BLOBFormat, len(payload))
				}
			}
		case <-ctx.Done():
			t.Fatal("BLOBs never arrived")
		}
	}
	if messages != 1 {
		t.Errorf("%d messages, want 1", messages)
	}
}

func TestReconnectReplaysRequests(t *testing.T) {
	f := newFakePeer(t)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c, err := Dial(ctx, f.ln.Addr().String(), Options{Reconnect: &Backoff{Initial: 20 * time.Millisecond, Max: 100 * time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	events, stop := c.Subscribe(16)
	defer stop()
	conn := f.accept(t)
	c.GetProperties("Weather Simulator", "")
	c.EnableBLOB("CCD Simulator", "", BLOBAlso)
	f.expect(t, `device="Weather Simulator"`)
	write(t, conn, defWeather)
	if _, err := c.Wait(ctx, "Weather Simulator", "WEATHER_STATUS", nil); err != nil {
		t.Fatal(err)
	}
	// A waiter blocked on the property wakes with ErrDisconnected.
	waitErr := make(chan error, 1)
	go func() {
		_, err := c.Wait(ctx, "Weather Simulator", "WEATHER_STATUS", func(p *Property) bool { return p.State == Alert })
		waitErr <- err
	}()
	time.Sleep(50 * time.Millisecond)
	conn.Close()
	if err := <-waitErr; !errors.Is(err, ErrDisconnected) {
		t.Errorf("waiter woke with %v, want ErrDisconnected", err)
	}
	conn2 := f.accept(t)
	f.expect(t, `<getProperties version="1.7" device="Weather Simulator"/>`)
	f.expect(t, `<enableBLOB device="CCD Simulator">Also</enableBLOB>`)
	write(t, conn2, defWeather)
	if _, err := c.Wait(ctx, "Weather Simulator", "WEATHER_STATUS", nil); err != nil {
		t.Fatal(err)
	}
	var kinds []EventKind
	for len(kinds) < 3 {
		select {
		case ev := <-events:
			if ev.Kind == EventDisconnected || ev.Kind == EventConnected {
				kinds = append(kinds, ev.Kind)
			}
			if ev.Kind == EventDefine && len(kinds) == 2 {
				kinds = append(kinds, ev.Kind)
			}
		case <-ctx.Done():
			t.Fatalf("events %v", kinds)
		}
	}
	if kinds[0] != EventDisconnected || kinds[1] != EventConnected {
		t.Errorf("events %v, want disconnected then connected", kinds)
	}
}

// Sexagesimal numbers as the protocol allows them (values worked by hand).
func TestParseNumber(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want float64
	}{
		{"12.5", 12.5},
		{" 5:30:00 ", 5.5},
		{"-20:15:00", -20.25},
		{"-0:30", -0.5},
		{"10 30 36", 10.51},
		{"1e3", 1000},
	} {
		got, err := ParseNumber(tc.in)
		if err != nil || math.Abs(got-tc.want) > 1e-12 {
			t.Errorf("ParseNumber(%q) = %v, %v; want %v", tc.in, got, err, tc.want)
		}
	}
	for _, bad := range []string{"", "abc", "1:2:3:4", "1:-2"} {
		if _, err := ParseNumber(bad); err == nil {
			t.Errorf("ParseNumber(%q) accepted", bad)
		}
	}
}

// A driver that answers a request which changes nothing with an Ok update
// not echoing it (seen with the telescope simulator on a goto to where it
// already points): SetAndWait takes it after QuietGrace.
func TestSetAndWaitQuietAnswer(t *testing.T) {
	f := newFakePeer(t)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c, err := Dial(ctx, f.ln.Addr().String(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	conn := f.accept(t)
	write(t, conn, defCoord)
	if _, err := c.Wait(ctx, "Telescope Simulator", "EQUATORIAL_EOD_COORD", nil); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	begin := time.Now()
	go func() {
		_, err := c.SetAndWait(ctx, Number, "Telescope Simulator", "EQUATORIAL_EOD_COORD", Value{Name: "RA", Number: 16.5}, Value{Name: "DEC", Number: 90})
		done <- err
	}()
	f.expect(t, `<newNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD"`)
	write(t, conn, `<setNumberVector device="Telescope Simulator" name="EQUATORIAL_EOD_COORD" state="Ok" timestamp="2026-12-04T17:40:00"><oneNumber name="RA">16.51</oneNumber><oneNumber name="DEC">90</oneNumber></setNumberVector>`)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if took := time.Since(begin); took < QuietGrace-100*time.Millisecond {
		t.Errorf("returned after %v, before the grace of %v", took, QuietGrace)
	}
}
