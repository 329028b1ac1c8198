// Package indi is a client of the INDI device protocol (Instrument-Neutral
// Distributed Interface): XML elements over TCP between a client and a
// server such as indiserver, which relays them to and from device drivers.
//
// It is written from the protocol's published description, "INDI: Instrument
// Neutral Distributed Interface" by Elwood C. Downey (protocol version 1.7),
// and covers what a client needs: getProperties; the def, set and new
// vectors of the five property kinds (Number, Switch, Text, Light, BLOB);
// enableBLOB; message; delProperty.
//
// # Why our own
//
// The Go module proxy has no maintained, general-purpose INDI client (the
// names it lists are small, unversioned or tied to one application), and the
// protocol is small: a client is a stream decoder, a table of properties and
// a writer. This one keeps to the shape of the standard library's
// net/textproto.
//
// # Model
//
// A Client owns one TCP connection. One reader goroutine decodes the stream
// element by element (encoding/xml's Decoder.Token) and routes each to the
// Property it defines, updates or deletes. A Property is a typed value with
// its state (Idle, Ok, Busy, Alert) and the timestamp of its last update.
// Calls take a context.Context: Set* sends a new vector and returns; Wait
// blocks until a property satisfies a condition or the context ends;
// SetAndWait does both, the way drivers signal completion (the vector goes
// Busy, then Ok or Alert).
//
// # Reconnect policy
//
// When the connection drops, every waiter wakes with ErrDisconnected and
// subscribers receive an Event of kind EventDisconnected. With
// Options.Reconnect set, the client dials again with exponential backoff
// (Initial doubling up to Max, forever or MaxAttempts times), and on success
// repeats the getProperties and enableBLOB requests it sent before, so the
// property table fills again; subscribers then receive EventConnected.
// Without it, the client stays closed and Err reports why.
package indi
