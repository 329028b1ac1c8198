package indi

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// State is the state of a property vector, or the value of a Light.
type State uint8

// Property states, as the protocol names them.
const (
	Idle State = iota
	Ok
	Busy
	Alert
)

func (s State) String() string {
	switch s {
	case Idle:
		return "Idle"
	case Ok:
		return "Ok"
	case Busy:
		return "Busy"
	case Alert:
		return "Alert"
	}
	return "State(" + strconv.Itoa(int(s)) + ")"
}

func parseState(s string) (State, error) {
	switch strings.TrimSpace(s) {
	case "Idle":
		return Idle, nil
	case "Ok":
		return Ok, nil
	case "Busy":
		return Busy, nil
	case "Alert":
		return Alert, nil
	}
	return Idle, fmt.Errorf("indi: unknown state %q", s)
}

// Kind is the type of a property's elements.
type Kind uint8

// Property kinds.
const (
	Number Kind = iota + 1
	Switch
	Text
	Light
	BLOB
)

func (k Kind) String() string {
	switch k {
	case Number:
		return "Number"
	case Switch:
		return "Switch"
	case Text:
		return "Text"
	case Light:
		return "Light"
	case BLOB:
		return "BLOB"
	}
	return "Kind(" + strconv.Itoa(int(k)) + ")"
}

// Element is one member of a property vector. Which value field is in use
// depends on the property's Kind.
type Element struct {
	Name, Label string
	// Number: the value, its printf-style format and limits.
	Number         float64
	Format         string
	Min, Max, Step float64
	// Switch: on or off.
	On bool
	// Text: the text.
	Text string
	// Light: its state.
	Light State
	// BLOB: the decoded bytes and their format (e.g. ".fits").
	Data       []byte
	BLOBFormat string
}

// Property is one property vector of a device, as last defined or set.
type Property struct {
	Device, Name, Label, Group string
	Kind                       Kind
	State                      State
	Perm                       string // "ro", "wo" or "rw" (empty for lights)
	Rule                       string // switches: "OneOfMany", "AtMostOne" or "AnyOfMany"
	Timeout                    time.Duration
	// Timestamp is the driver's time of the last definition or update (UTC;
	// the client's clock when the driver sent none).
	Timestamp time.Time
	// Message is the last message that came with the property, if any.
	Message  string
	Elements []Element
}

// Element returns the named element.
func (p *Property) Element(name string) (Element, bool) {
	for _, e := range p.Elements {
		if e.Name == name {
			return e, true
		}
	}
	return Element{}, false
}

// Num returns the value of a Number element (NaN when missing).
func (p *Property) Num(name string) float64 {
	if e, ok := p.Element(name); ok {
		return e.Number
	}
	return math.NaN()
}

// IsOn reports whether a Switch element is on.
func (p *Property) IsOn(name string) bool {
	e, ok := p.Element(name)
	return ok && e.On
}

// OnSwitch returns the name of the first switch that is on ("" for none).
func (p *Property) OnSwitch() string {
	for _, e := range p.Elements {
		if e.On {
			return e.Name
		}
	}
	return ""
}

// clone copies p deeply enough for a caller to keep (BLOB bytes are shared:
// they are never modified in place).
func (p *Property) clone() Property {
	c := *p
	c.Elements = append([]Element(nil), p.Elements...)
	return c
}

// ParseNumber parses an INDI number: decimal, or sexagesimal with ':' or
// ' ' between up to three parts ("-12:30:15.5" is -12.504...), as the
// protocol allows.
func ParseNumber(s string) (float64, error) {
	s = strings.TrimSpace(s)
	if v, err := strconv.ParseFloat(s, 64); err == nil {
		return v, nil
	}
	parts := strings.FieldsFunc(s, func(r rune) bool { return r == ':' || r == ' ' || r == ';' })
	if len(parts) == 0 || len(parts) > 3 {
		return 0, fmt.Errorf("indi: bad number %q", s)
	}
	neg := strings.HasPrefix(parts[0], "-")
	v, scale := 0.0, 1.0
	for i, p := range parts {
		x, err := strconv.ParseFloat(p, 64)
		if err != nil {
			return 0, fmt.Errorf("indi: bad number %q", s)
		}
		if i > 0 && x < 0 {
			return 0, fmt.Errorf("indi: bad number %q", s)
		}
		v += math.Abs(x) / scale
		scale *= 60
	}
	if neg {
		v = -v
	}
	return v, nil
}

// timestamp layouts the protocol uses (ISO 8601, UTC, no zone).
var timeLayouts = []string{"2006-01-02T15:04:05.999999999", "2006-01-02T15:04:05", time.RFC3339Nano}

func parseTimestamp(s string) (time.Time, bool) {
	s = strings.TrimSpace(s)
	if s == "" {
		return time.Time{}, false
	}
	for _, l := range timeLayouts {
		if t, err := time.ParseInLocation(l, s, time.UTC); err == nil {
			return t.UTC(), true
		}
	}
	return time.Time{}, false
}
