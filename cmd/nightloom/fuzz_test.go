package main

// Fuzz targets for the client's file readers (issue 7): the protojson
// request files behind every --file flag, and the orbit file of the
// offline `sky --orbit`. Seed corpora are in testdata/fuzz/ (the demo
// scenario's files and broken variants of them); run one with
//
//	go test -run '^$' -fuzz '^FuzzRequestFile$' -fuzztime 30s ./cmd/nightloom/

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/ephem"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// requestFileKinds are the messages the client reads with --file (the
// readRequest calls of cmd_*.go), in the order the corpus's first value
// selects them.
var requestFileKinds = []func() proto.Message{
	func() proto.Message { return &pb.CreateSiteRequest{} },
	func() proto.Message { return &pb.UpdateSiteRequest{} },
	func() proto.Message { return &pb.CreateTargetRequest{} },
	func() proto.Message { return &pb.UpdateTargetRequest{} },
	func() proto.Message { return &pb.QueueBlocksRequest{} },
	func() proto.Message { return &pb.ReportProgressRequest{} },
	func() proto.Message { return &pb.MakePlanRequest{} },
	func() proto.Message { return &pb.ReplanRequest{} },
	func() proto.Message { return &pb.EphemerisRequest{} },
	func() proto.Message { return &pb.VisibilityRequest{} },
}

// FuzzRequestFile: readRequest on any file content, as any of the request
// messages, never panics; it either refuses the file with a fileError that
// names the file and the message, or returns a message that survives a
// round trip through the canonical JSON mapping unchanged (compared as
// deterministic binary, so that NaN compares equal to itself).
func FuzzRequestFile(f *testing.F) {
	f.Add(uint8(0), []byte(`{"site": {"name": "Fuzz Hill", "latitudeDeg": 40, "longitudeDeg": -3, "timeZone": "UTC"}}`))
	f.Add(uint8(4), []byte(`{"blocks": [{"siteId": "s", "targetId": "@NLD 12", "exposure": "300s", "framesWanted": 3}]}`))
	path := filepath.Join(f.TempDir(), "request.json") // one file per fuzzing process, rewritten for each input
	f.Fuzz(func(t *testing.T, kind uint8, data []byte) {
		m := requestFileKinds[int(kind)%len(requestFileKinds)]()
		if err := os.WriteFile(path, data, 0o600); err != nil {
			t.Fatal(err)
		}
		err := readRequest(path, m)
		name := string(m.ProtoReflect().Descriptor().Name())
		if err != nil {
			var fe *fileError
			if !errors.As(err, &fe) || fe.path != path {
				t.Fatalf("error %T %v, want a *fileError for %s", err, err, path)
			}
			if msg := err.Error(); !strings.Contains(msg, path) || !strings.Contains(msg, "not a valid "+name) {
				t.Fatalf("error %q does not name the file and %s", msg, name)
			}
			return
		}
		out, err := protojson.Marshal(m)
		if err != nil {
			t.Fatalf("accepted %s that does not marshal back: %v", name, err)
		}
		again := requestFileKinds[int(kind)%len(requestFileKinds)]()
		if err := parseRequest("again.json", out, again); err != nil {
			t.Fatalf("the canonical JSON of an accepted %s is refused: %v\n%s", name, err, out)
		}
		b1, err1 := proto.MarshalOptions{Deterministic: true}.Marshal(m)
		b2, err2 := proto.MarshalOptions{Deterministic: true}.Marshal(again)
		if err1 != nil || err2 != nil || !bytes.Equal(b1, b2) {
			t.Fatalf("%s changed in a JSON round trip:\nfirst  %v\nsecond %v", name, m, again)
		}
	})
}

// orbitKeys are the fields of an orbit file (offline.go orbitFile).
var orbitKeys = []string{"q_au", "e", "i_deg", "node_deg", "peri_deg", "perihelion_tt", "m1", "k1"}

// FuzzOrbitFile: readOrbit on any file content never panics, and refuses
// with a usage error about --orbit, or accepts only what an independent
// reading of the same file allows: a JSON object (its first value) whose
// keys are orbit fields (encoding/json matches them without regard to
// case), with the five elements as finite numbers, perihelion_tt in RFC
// 3339, and m1 and k1 together or not at all. The accepted orbit is the one
// in the file: at the perihelion instant the heliocentric distance equals
// q_au (to 1e-9 relative), and the state is finite 100 days later.
func FuzzOrbitFile(f *testing.F) {
	f.Add([]byte(`{"q_au": 1.2, "e": 0.6, "i_deg": 10, "node_deg": 20, "peri_deg": 30, "perihelion_tt": "2030-05-01T00:00:00Z"}`))
	path := filepath.Join(f.TempDir(), "orbit.json")
	f.Fuzz(func(t *testing.T, data []byte) {
		if err := os.WriteFile(path, data, 0o600); err != nil {
			t.Fatal(err)
		}
		mover, star, err := readOrbit(path)
		c, _ := mover.(*ephem.Conic)
		if err != nil {
			var ue *usageError
			if !errors.As(err, &ue) || !strings.HasPrefix(err.Error(), "flag --orbit: ") {
				t.Fatalf("error %T %q, want a usage error about --orbit", err, err)
			}
			if mover != nil || star != nil {
				t.Fatal("a target with the error")
			}
			return
		}
		var probe map[string]json.RawMessage
		if json.Unmarshal(data, &probe) == nil && probe["q_au"] == nil {
			return // the API's target form: checked by server.ValidateTarget's own tests
		}
		vals, ok := firstObject(data)
		if !ok {
			t.Fatalf("accepted a file whose first JSON value is not an object: %q", data)
		}
		num := map[string]float64{}
		var tp string
		for _, kv := range vals {
			key := ""
			for _, k := range orbitKeys {
				if strings.EqualFold(kv.key, k) {
					key = k
				}
			}
			if key == "" {
				t.Fatalf("accepted the unknown field %q", kv.key)
			}
			if string(kv.raw) == "null" {
				delete(num, key)
				if key == "perihelion_tt" {
					tp = ""
				}
				continue
			}
			if key == "perihelion_tt" {
				if err := json.Unmarshal(kv.raw, &tp); err != nil {
					t.Fatalf("accepted perihelion_tt %s", kv.raw)
				}
				continue
			}
			var x float64
			if err := json.Unmarshal(kv.raw, &x); err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
				t.Fatalf("accepted %s = %s", key, kv.raw)
			}
			num[key] = x
		}
		for _, k := range orbitKeys[:5] {
			if _, ok := num[k]; !ok {
				t.Fatalf("accepted a file without %s: %q", k, data)
			}
		}
		_, m1 := num["m1"]
		_, k1 := num["k1"]
		if m1 != k1 {
			t.Fatalf("accepted m1 without k1 or k1 without m1: %q", data)
		}
		peri, err := time.Parse(time.RFC3339Nano, tp)
		if err != nil {
			t.Fatalf("accepted perihelion_tt %q: %v", tp, err)
		}
		if c == nil {
			t.Fatalf("accepted the short orbit form but got no conic: %q", data)
		}
		at := ephem.JDFromLabel(peri)
		p, v := c.State(at)
		if r, q := p.Norm(), num["q_au"]; !(math.Abs(r-q) <= 1e-9*q) {
			t.Fatalf("at perihelion r = %v au, want q_au = %v (file %q)", r, q, data)
		}
		p, v = c.State(at.AddDays(100))
		for i := 0; i < 3; i++ {
			if math.IsNaN(p[i]) || math.IsInf(p[i], 0) || math.IsNaN(v[i]) || math.IsInf(v[i], 0) {
				t.Fatalf("state 100 days after perihelion %v %v (file %q)", p, v, data)
			}
		}
	})
}

type keyValue struct {
	key string
	raw json.RawMessage
}

// firstObject reads the first JSON value of data as an object and returns
// its members in file order (as encoding/json's Decoder, which readOrbit
// uses, sees them).
func firstObject(data []byte) ([]keyValue, bool) {
	dec := json.NewDecoder(bytes.NewReader(data))
	tok, err := dec.Token()
	if err != nil || tok != json.Delim('{') {
		return nil, false
	}
	var out []keyValue
	for dec.More() {
		tok, err := dec.Token()
		if err != nil {
			return nil, false
		}
		key, ok := tok.(string)
		if !ok {
			return nil, false
		}
		var raw json.RawMessage
		if err := dec.Decode(&raw); err != nil {
			return nil, false
		}
		out = append(out, keyValue{key, raw})
	}
	if tok, err := dec.Token(); err != nil || tok != json.Delim('}') {
		return nil, false
	}
	return out, true
}

// TestOrbitFileRefusesTrailingData: an orbit file holds one JSON object;
// anything after it (a second object from a careless concatenation, a
// stray word) must be refused, as the request files' protojson reader
// refuses it, rather than silently ignored.
func TestOrbitFileRefusesTrailingData(t *testing.T) {
	good := `{"q_au": 0.42, "e": 1.0021, "i_deg": 131.4, "node_deg": 33, "peri_deg": 195, "perihelion_tt": "2027-01-21T06:00:00Z"}`
	dir := t.TempDir()
	for name, content := range map[string]string{
		"alone":          good,
		"newline":        good + "\n",
		"second object":  good + `{"q_au": 9}`,
		"trailing word":  good + " oops",
		"trailing comma": good + ",",
	} {
		path := filepath.Join(dir, strings.ReplaceAll(name, " ", "_")+".json")
		if err := os.WriteFile(path, []byte(content), 0o600); err != nil {
			t.Fatal(err)
		}
		_, _, err := readOrbit(path)
		if wantOK := name == "alone" || name == "newline"; (err == nil) != wantOK {
			t.Errorf("%s: readOrbit error %v, want error %v", name, err, !wantOK)
		}
	}
	// The request files refuse the same thing.
	var m pb.CreateSiteRequest
	if err := parseRequest("x.json", []byte(`{"site": {"name": "a"}} oops`), &m); err == nil {
		t.Error("parseRequest accepted trailing data")
	}
}
