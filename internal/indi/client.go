package indi

import (
	"bufio"
	"context"
	"encoding/xml"
	"errors"
	"fmt"
	"math"
	"net"
	"sync"
	"time"
)

// Errors of the client.
var (
	// ErrDisconnected: the connection dropped (or was not up) while a call
	// needed it.
	ErrDisconnected = errors.New("indi: disconnected")
	// ErrClosed: the client was closed.
	ErrClosed = errors.New("indi: client closed")
	// ErrAlert: the device answered a request with the Alert state.
	ErrAlert = errors.New("indi: property went to Alert")
)

// Backoff is the reconnect policy: wait Initial before the first redial,
// double the wait after each failure up to Max, and give up after
// MaxAttempts failed dials in a row (0: never give up).
type Backoff struct {
	Initial, Max time.Duration
	MaxAttempts  int
}

// Options configure a Client.
type Options struct {
	// Reconnect, when set, makes the client redial after the connection
	// drops; nil: the client ends with the connection.
	Reconnect *Backoff
	// DialTimeout bounds each dial (default 10 s).
	DialTimeout time.Duration
}

// EventKind says what an Event reports.
type EventKind uint8

// Event kinds.
const (
	EventDefine       EventKind = iota + 1 // a def*Vector arrived
	EventSet                               // a set*Vector arrived
	EventDelete                            // delProperty (Name empty: the whole device)
	EventMessage                           // a message element
	EventDisconnected                      // the connection dropped
	EventConnected                         // the connection came back (reconnect)
)

// Event is one thing that happened on the connection, as delivered to
// subscribers. Property holds the property after the update (for define and
// set), with only the updated elements' BLOB data.
type Event struct {
	Kind         EventKind
	Device, Name string
	Property     Property
	Message      string
	Time         time.Time
	Err          error // for EventDisconnected
}

type propKey struct{ device, name string }

type entry struct {
	Property
	seq uint64 // incremented on every update
}

// Client is a connection to an INDI server. Its methods are safe for
// concurrent use.
type Client struct {
	addr string
	opts Options

	wmu  sync.Mutex // serialises writes
	mu   sync.Mutex
	conn net.Conn // nil while disconnected
	gen  uint64   // incremented on every disconnect
	// changed is closed and replaced on every update and disconnect.
	changed  chan struct{}
	props    map[propKey]*entry
	subs     map[*subscriber]struct{}
	requests [][]byte // getProperties and enableBLOB requests, replayed on reconnect
	closed   bool
	closing  chan struct{} // closed by Close: stops a redial's wait
	err      error         // why the client ended
	done     chan struct{}
}

type subscriber struct {
	ch      chan Event
	dropped int
}

// Dial connects to an INDI server at addr (host:port) and starts the reader.
// Nothing is requested yet: call GetProperties.
func Dial(ctx context.Context, addr string, opts Options) (*Client, error) {
	if opts.DialTimeout <= 0 {
		opts.DialTimeout = 10 * time.Second
	}
	c := &Client{addr: addr, opts: opts, changed: make(chan struct{}), props: map[propKey]*entry{},
		subs: map[*subscriber]struct{}{}, done: make(chan struct{}), closing: make(chan struct{})}
	conn, err := c.dial(ctx)
	if err != nil {
		return nil, err
	}
	c.conn = conn
	go c.run(conn)
	return c, nil
}

func (c *Client) dial(ctx context.Context) (net.Conn, error) {
	d := net.Dialer{Timeout: c.opts.DialTimeout}
	conn, err := d.DialContext(ctx, "tcp", c.addr)
	if err != nil {
		return nil, fmt.Errorf("indi: dial %s: %w", c.addr, err)
	}
	return conn, nil
}

// run reads connection after connection until the client ends.
func (c *Client) run(conn net.Conn) {
	defer close(c.done)
	for {
		err := c.read(conn)
		conn.Close()
		c.mu.Lock()
		closed := c.closed
		c.conn = nil
		c.gen++
		c.props = map[propKey]*entry{} // stale: the server defines them again
		c.broadcastLocked()
		c.publishLocked(Event{Kind: EventDisconnected, Time: time.Now().UTC(), Err: err})
		c.mu.Unlock()
		if closed {
			c.finish(ErrClosed)
			return
		}
		if c.opts.Reconnect == nil {
			c.finish(fmt.Errorf("%w: %v", ErrDisconnected, err))
			return
		}
		if conn, err = c.redial(); err != nil {
			c.finish(err)
			return
		}
	}
}

// redial dials with the backoff policy and replays the remembered requests.
func (c *Client) redial() (net.Conn, error) {
	b := *c.opts.Reconnect
	wait := max(b.Initial, 10*time.Millisecond)
	for attempt := 1; ; attempt++ {
		select {
		case <-time.After(wait):
		case <-c.closing:
			return nil, ErrClosed
		}
		ctx, cancel := context.WithTimeout(context.Background(), c.opts.DialTimeout)
		conn, err := c.dial(ctx)
		cancel()
		if err == nil {
			c.mu.Lock()
			if c.closed {
				c.mu.Unlock()
				conn.Close()
				return nil, ErrClosed
			}
			reqs := append([][]byte(nil), c.requests...)
			c.mu.Unlock()
			c.wmu.Lock()
			for _, r := range reqs {
				if _, err = conn.Write(r); err != nil {
					break
				}
			}
			c.wmu.Unlock()
			if err == nil {
				c.mu.Lock()
				c.conn = conn
				c.broadcastLocked()
				c.publishLocked(Event{Kind: EventConnected, Time: time.Now().UTC()})
				c.mu.Unlock()
				return conn, nil
			}
			conn.Close()
		}
		if b.MaxAttempts > 0 && attempt >= b.MaxAttempts {
			return nil, fmt.Errorf("%w: gave up after %d attempts: %v", ErrDisconnected, attempt, err)
		}
		wait = min(2*wait, max(b.Max, b.Initial))
	}
}

func (c *Client) finish(err error) {
	c.mu.Lock()
	c.err = err
	c.closed = true
	for s := range c.subs {
		close(s.ch)
		delete(c.subs, s)
	}
	c.broadcastLocked()
	c.mu.Unlock()
}

// read decodes one connection's stream until it fails, routing each
// top-level element.
func (c *Client) read(conn net.Conn) error {
	d := xml.NewDecoder(bufio.NewReaderSize(conn, 1<<16))
	for {
		tok, err := d.Token()
		if err != nil {
			return err
		}
		se, ok := tok.(xml.StartElement)
		if !ok {
			continue
		}
		var w wireElement
		if err := d.DecodeElement(&w, &se); err != nil {
			return err
		}
		c.route(&w)
	}
}

// route applies one element to the property table and tells subscribers.
func (c *Client) route(w *wireElement) {
	now := time.Now().UTC()
	name := w.XMLName.Local
	switch {
	case len(name) > 3 && name[:3] == "def" && kindOf(name) != 0:
		p, err := vectorOf(w, now)
		if err != nil {
			return // a malformed vector is dropped; the stream goes on
		}
		c.mu.Lock()
		k := propKey{p.Device, p.Name}
		var seq uint64
		if old := c.props[k]; old != nil {
			seq = old.seq
		}
		c.props[k] = &entry{Property: p, seq: seq + 1}
		c.broadcastLocked()
		c.publishLocked(Event{Kind: EventDefine, Device: p.Device, Name: p.Name, Property: p.clone(), Message: p.Message, Time: now})
		c.mu.Unlock()
	case len(name) > 3 && name[:3] == "set" && kindOf(name) != 0:
		u, err := vectorOf(w, now)
		if err != nil {
			return
		}
		c.mu.Lock()
		k := propKey{u.Device, u.Name}
		e := c.props[k]
		if e == nil { // a set before its def: keep what it says
			e = &entry{Property: Property{Device: u.Device, Name: u.Name, Kind: u.Kind}}
			c.props[k] = e
		}
		if attr(w.Attrs, "state") != "" {
			e.State = u.State
		}
		if attr(w.Attrs, "timeout") != "" {
			e.Timeout = u.Timeout
		}
		e.Timestamp, e.Message = u.Timestamp, u.Message
		for _, ue := range u.Elements {
			found := false
			for i := range e.Elements {
				if e.Elements[i].Name != ue.Name {
					continue
				}
				found = true
				pe := &e.Elements[i]
				switch u.Kind {
				case Number:
					pe.Number = ue.Number
				case Switch:
					pe.On = ue.On
				case Text:
					pe.Text = ue.Text
				case Light:
					pe.Light = ue.Light
				case BLOB:
					pe.Data, pe.BLOBFormat = ue.Data, ue.BLOBFormat
				}
			}
			if !found {
				e.Elements = append(e.Elements, ue)
			}
		}
		e.seq++
		c.broadcastLocked()
		ev := Event{Kind: EventSet, Device: u.Device, Name: u.Name, Property: e.clone(), Message: u.Message, Time: now}
		c.publishLocked(ev)
		c.mu.Unlock()
	case name == "delProperty":
		dev, pn := attr(w.Attrs, "device"), attr(w.Attrs, "name")
		c.mu.Lock()
		for k := range c.props {
			if k.device == dev && (pn == "" || k.name == pn) {
				delete(c.props, k)
			}
		}
		c.broadcastLocked()
		c.publishLocked(Event{Kind: EventDelete, Device: dev, Name: pn, Message: attr(w.Attrs, "message"), Time: now})
		c.mu.Unlock()
	case name == "message":
		c.mu.Lock()
		c.publishLocked(Event{Kind: EventMessage, Device: attr(w.Attrs, "device"), Message: attr(w.Attrs, "message"), Time: now})
		c.mu.Unlock()
	}
}

func (c *Client) broadcastLocked() {
	close(c.changed)
	c.changed = make(chan struct{})
}

// publishLocked hands ev to every subscriber without blocking the reader: a
// subscriber whose buffer is full misses the event (counted in Dropped).
func (c *Client) publishLocked(ev Event) {
	for s := range c.subs {
		select {
		case s.ch <- ev:
		default:
			s.dropped++
		}
	}
}

// Subscribe returns a channel receiving every event from now on, buffered
// to buf events, and a function that ends the subscription. Events that do
// not fit the buffer are dropped, never blocking the reader; size the buffer
// for the burst you expect. The channel is closed when the client ends.
func (c *Client) Subscribe(buf int) (<-chan Event, func()) {
	s := &subscriber{ch: make(chan Event, max(buf, 1))}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.closed {
		close(s.ch)
		return s.ch, func() {}
	}
	c.subs[s] = struct{}{}
	return s.ch, func() {
		c.mu.Lock()
		defer c.mu.Unlock()
		if _, ok := c.subs[s]; ok {
			delete(c.subs, s)
			close(s.ch)
		}
	}
}

// Connected reports whether the connection is up now.
func (c *Client) Connected() bool {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.conn != nil
}

// Err returns why the client ended (nil while it runs).
func (c *Client) Err() error {
	select {
	case <-c.done:
		return c.err
	default:
		return nil
	}
}

// Done is closed when the client has ended.
func (c *Client) Done() <-chan struct{} { return c.done }

// Close ends the connection and the client.
func (c *Client) Close() error {
	c.mu.Lock()
	if !c.closed {
		c.closed = true
		close(c.closing)
	}
	conn := c.conn
	c.mu.Unlock()
	if conn != nil {
		conn.Close()
	}
	<-c.done
	return nil
}

// send writes raw bytes to the current connection.
func (c *Client) send(b []byte) error {
	c.mu.Lock()
	conn, closed := c.conn, c.closed
	c.mu.Unlock()
	if closed {
		return ErrClosed
	}
	if conn == nil {
		return ErrDisconnected
	}
	c.wmu.Lock()
	defer c.wmu.Unlock()
	if _, err := conn.Write(b); err != nil {
		return fmt.Errorf("%w: %v", ErrDisconnected, err)
	}
	return nil
}

// remember keeps a request to replay after a reconnect, then sends it.
func (c *Client) remember(b []byte) error {
	c.mu.Lock()
	c.requests = append(c.requests, b)
	c.mu.Unlock()
	return c.send(b)
}

// GetProperties asks the server to define the properties of one device
// (all devices when device is empty; one property when name is set too).
// The request is replayed after a reconnect.
func (c *Client) GetProperties(device, name string) error {
	s := `<getProperties version="` + ProtocolVersion + `"`
	if device != "" {
		s += ` device="` + escape(device) + `"`
		if name != "" {
			s += ` name="` + escape(name) + `"`
		}
	}
	return c.remember([]byte(s + "/>\n"))
}

// BLOBMode says whether the server sends BLOBs to this client.
type BLOBMode string

// BLOB modes of enableBLOB.
const (
	BLOBNever BLOBMode = "Never" // no BLOBs (the default)
	BLOBAlso  BLOBMode = "Also"  // BLOBs and everything else
	BLOBOnly  BLOBMode = "Only"  // BLOBs only
)

// EnableBLOB sets the BLOB mode for a device (or one of its properties).
// The request is replayed after a reconnect.
func (c *Client) EnableBLOB(device, name string, mode BLOBMode) error {
	s := `<enableBLOB device="` + escape(device) + `"`
	if name != "" {
		s += ` name="` + escape(name) + `"`
	}
	return c.remember([]byte(s + ">" + string(mode) + "</enableBLOB>\n"))
}

// Set sends a new vector of the given kind with the given elements; it
// does not wait for the device.
func (c *Client) Set(kind Kind, device, name string, vals ...Value) error {
	b, err := encodeNew(kind, device, name, vals, time.Now())
	if err != nil {
		return err
	}
	return c.send(b)
}

// Property returns a copy of a property as last defined or set.
func (c *Client) Property(device, name string) (Property, bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	e := c.props[propKey{device, name}]
	if e == nil {
		return Property{}, false
	}
	return e.clone(), true
}

// Wait blocks until the property exists and cond (nil: any) holds for it,
// the context ends, or the connection drops; it returns the property as it
// was when cond held.
func (c *Client) Wait(ctx context.Context, device, name string, cond func(*Property) bool) (Property, error) {
	c.mu.Lock()
	gen := c.gen
	c.mu.Unlock()
	return c.waitFrom(ctx, device, name, gen, 0, cond)
}

// waitFrom waits for an update after sequence number seq (0: any state)
// within connection generation gen.
func (c *Client) waitFrom(ctx context.Context, device, name string, gen, seq uint64, cond func(*Property) bool) (Property, error) {
	for {
		c.mu.Lock()
		if c.closed {
			c.mu.Unlock()
			return Property{}, ErrClosed
		}
		if c.gen != gen {
			c.mu.Unlock()
			return Property{}, ErrDisconnected
		}
		e := c.props[propKey{device, name}]
		if e != nil && e.seq > seq && (cond == nil || cond(&e.Property)) {
			p := e.clone()
			c.mu.Unlock()
			return p, nil
		}
		var last string
		if e != nil {
			last = fmt.Sprintf(" (last state %v at %s)", e.State, e.Timestamp.Format(time.RFC3339))
		}
		ch := c.changed
		c.mu.Unlock()
		select {
		case <-ch:
		case <-ctx.Done():
			return Property{}, fmt.Errorf("indi: waiting for %s.%s%s: %w", device, name, last, ctx.Err())
		}
	}
}

// SetAndWait sends a new vector and waits until the device has carried it
// out: an update of the property that is not Busy, after either a Busy
// update or one whose values already show the request (a driver that
// finishes at once sends Ok directly). When neither comes within
// QuietGrace and the property is neither Busy nor Alert, the driver is
// taken to have done it at once (some answer a request that changes nothing
// with an update that does not echo it). An Alert answer returns ErrAlert
// with the driver's message. Number values match within NumberTolerance
// (relative).
func (c *Client) SetAndWait(ctx context.Context, kind Kind, device, name string, vals ...Value) (Property, error) {
	c.mu.Lock()
	gen := c.gen
	var seq uint64
	if e := c.props[propKey{device, name}]; e != nil {
		seq = e.seq
	}
	c.mu.Unlock()
	if err := c.Set(kind, device, name, vals...); err != nil {
		return Property{}, err
	}
	sawBusy := false
	var failed bool
	cond := func(p *Property) bool {
		switch p.State {
		case Busy:
			sawBusy = true
			return false
		case Alert:
			failed = true
			return true
		}
		return sawBusy || shows(p, kind, vals)
	}
	gctx, cancel := context.WithTimeout(ctx, QuietGrace)
	p, err := c.waitFrom(gctx, device, name, gen, seq, cond)
	cancel()
	if err != nil && ctx.Err() == nil && errors.Is(err, context.DeadlineExceeded) {
		c.mu.Lock()
		e, sameConn := c.props[propKey{device, name}], c.gen == gen
		quiet := e != nil && sameConn && !sawBusy && e.State != Busy && e.State != Alert
		if quiet {
			p = e.clone()
		}
		c.mu.Unlock()
		if quiet {
			return p, nil
		}
		p, err = c.waitFrom(ctx, device, name, gen, seq, cond)
	}
	if err != nil {
		return p, err
	}
	if failed {
		return p, fmt.Errorf("%w: %s.%s: %s", ErrAlert, device, name, p.Message)
	}
	return p, nil
}

// QuietGrace is how long SetAndWait waits for a sign that the driver took
// a request (a Busy update, or values equal to the request) before it
// accepts a property that is neither Busy nor Alert.
const QuietGrace = 3 * time.Second

// NumberTolerance is the relative tolerance with which SetAndWait sees a
// requested number in an update (1e-6 of the value, at least 1e-6).
const NumberTolerance = 1e-6

// shows reports whether p holds the requested values.
func shows(p *Property, kind Kind, vals []Value) bool {
	for _, v := range vals {
		e, ok := p.Element(v.Name)
		if !ok {
			return false
		}
		switch kind {
		case Number:
			if math.Abs(e.Number-v.Number) > NumberTolerance*max(1, math.Abs(v.Number)) {
				return false
			}
		case Switch:
			if e.On != v.On {
				return false
			}
		case Text:
			if e.Text != v.Text {
				return false
			}
		}
	}
	return true
}
