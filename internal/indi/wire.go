package indi

// The wire format: decoding the elements a server sends and encoding the
// ones a client sends (INDI protocol 1.7, sections on the XML elements).

import (
	"bytes"
	"compress/zlib"
	"encoding/base64"
	"encoding/xml"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
)

// ProtocolVersion is the version sent with getProperties.
const ProtocolVersion = "1.7"

// wireElement is one top-level element of the stream with its children.
type wireElement struct {
	XMLName  xml.Name
	Attrs    []xml.Attr  `xml:",any,attr"`
	Children []wireChild `xml:",any"`
	Text     string      `xml:",chardata"`
}

// wireChild is one member element (defNumber, oneSwitch, ...).
type wireChild struct {
	XMLName xml.Name
	Attrs   []xml.Attr `xml:",any,attr"`
	Text    string     `xml:",chardata"`
}

func attr(attrs []xml.Attr, name string) string {
	for _, a := range attrs {
		if a.Name.Local == name {
			return a.Value
		}
	}
	return ""
}

// kindOf returns the kind named in an element name such as
// "setSwitchVector" or "defBLOB".
func kindOf(elem string) Kind {
	for _, k := range []Kind{Number, Switch, Text, Light, BLOB} {
		if strings.Contains(elem, k.String()) {
			return k
		}
	}
	return 0
}

// vectorOf decodes a def or set vector into a Property (only the attributes
// present are meaningful for a set).
func vectorOf(w *wireElement, now time.Time) (Property, error) {
	p := Property{
		Device:  attr(w.Attrs, "device"),
		Name:    attr(w.Attrs, "name"),
		Label:   attr(w.Attrs, "label"),
		Group:   attr(w.Attrs, "group"),
		Kind:    kindOf(w.XMLName.Local),
		Perm:    attr(w.Attrs, "perm"),
		Rule:    attr(w.Attrs, "rule"),
		Message: attr(w.Attrs, "message"),
	}
	if p.Device == "" || p.Name == "" {
		return p, fmt.Errorf("indi: %s without device or name", w.XMLName.Local)
	}
	if s := attr(w.Attrs, "state"); s != "" {
		st, err := parseState(s)
		if err != nil {
			return p, err
		}
		p.State = st
	}
	if s := attr(w.Attrs, "timeout"); s != "" {
		if v, err := strconv.ParseFloat(strings.TrimSpace(s), 64); err == nil && v >= 0 {
			p.Timeout = time.Duration(v * float64(time.Second))
		}
	}
	p.Timestamp = now
	if t, ok := parseTimestamp(attr(w.Attrs, "timestamp")); ok {
		p.Timestamp = t
	}
	for i := range w.Children {
		c := &w.Children[i]
		e := Element{Name: attr(c.Attrs, "name"), Label: attr(c.Attrs, "label")}
		if e.Name == "" {
			continue
		}
		var err error
		switch p.Kind {
		case Number:
			e.Format = attr(c.Attrs, "format")
			if e.Number, err = ParseNumber(c.Text); err != nil {
				return p, fmt.Errorf("indi: %s.%s.%s: %w", p.Device, p.Name, e.Name, err)
			}
			e.Min, _ = ParseNumber(attr(c.Attrs, "min"))
			e.Max, _ = ParseNumber(attr(c.Attrs, "max"))
			e.Step, _ = ParseNumber(attr(c.Attrs, "step"))
		case Switch:
			e.On = strings.TrimSpace(c.Text) == "On"
		case Text:
			e.Text = c.Text
		case Light:
			if e.Light, err = parseState(c.Text); err != nil {
				return p, err
			}
		case BLOB:
			e.BLOBFormat = attr(c.Attrs, "format")
			if e.Data, e.BLOBFormat, err = decodeBLOB(c.Text, e.BLOBFormat); err != nil {
				return p, fmt.Errorf("indi: %s.%s.%s: %w", p.Device, p.Name, e.Name, err)
			}
		}
		p.Elements = append(p.Elements, e)
	}
	return p, nil
}

// decodeBLOB decodes base64 (white space allowed) and, for a format ending
// in ".z", inflates the zlib stream, dropping the suffix.
func decodeBLOB(text, format string) ([]byte, string, error) {
	clean := strings.Map(func(r rune) rune {
		switch r {
		case ' ', '\n', '\r', '\t':
			return -1
		}
		return r
	}, text)
	data, err := base64.StdEncoding.DecodeString(clean)
	if err != nil {
		return nil, format, fmt.Errorf("BLOB base64: %w", err)
	}
	if strings.HasSuffix(format, ".z") {
		r, err := zlib.NewReader(bytes.NewReader(data))
		if err != nil {
			return nil, format, fmt.Errorf("BLOB zlib: %w", err)
		}
		if data, err = io.ReadAll(r); err != nil {
			return nil, format, fmt.Errorf("BLOB zlib: %w", err)
		}
		format = strings.TrimSuffix(format, ".z")
	}
	return data, format, nil
}

// escape returns s escaped for an XML attribute or text.
func escape(s string) string {
	var b strings.Builder
	xml.EscapeText(&b, []byte(s))
	return b.String()
}

// Value is one element of a new vector to send: exactly one of the fields
// matching the property's kind is used.
type Value struct {
	Name   string
	Number float64
	On     bool
	Text   string
}

// encodeNew renders a newXVector element.
func encodeNew(kind Kind, device, name string, vals []Value, now time.Time) ([]byte, error) {
	var one string
	switch kind {
	case Number, Switch, Text:
		one = "one" + kind.String()
	default:
		return nil, fmt.Errorf("indi: cannot send a new %v vector", kind)
	}
	var b bytes.Buffer
	fmt.Fprintf(&b, `<new%sVector device="%s" name="%s" timestamp="%s">`+"\n", kind, escape(device), escape(name),
		now.UTC().Format("2006-01-02T15:04:05"))
	for _, v := range vals {
		var s string
		switch kind {
		case Number:
			s = strconv.FormatFloat(v.Number, 'g', -1, 64)
		case Switch:
			s = "Off"
			if v.On {
				s = "On"
			}
		case Text:
			s = escape(v.Text)
		}
		fmt.Fprintf(&b, "  <%s name=\"%s\">%s</%s>\n", one, escape(v.Name), s, one)
	}
	fmt.Fprintf(&b, "</new%sVector>\n", kind)
	return b.Bytes(), nil
}
