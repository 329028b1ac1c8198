package main

import (
	"bytes"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/nightloom/nightloom/internal/testenv"
)

// Card layouts from the FITS standard 4.0, sect. 4.2 (fixed format): the
// value indicator in columns 9-10, strings quoted from column 11 with at
// least 8 characters inside the quotes, numbers and logicals right-justified
// to column 30, quotes inside a string doubled.
func TestCardFormat(t *testing.T) {
	for _, tc := range []struct {
		c    card
		want string
	}{
		{card{"OBJECT", "M 42", ""}, "OBJECT  = 'M 42    '"},
		{card{"OBSERVER", "O'Hara", ""}, "OBSERVER= 'O''Hara '"},
		{card{"EXPTIME", 2.0, "s"}, "EXPTIME =                   2. / s"},
		{card{"NAXIS", 2, ""}, "NAXIS   =                    2"},
		{card{"SIMPLE", true, ""}, "SIMPLE  =                    T"},
		{card{"RA", 83.8221, "deg"}, "RA      =              83.8221 / deg"},
		{card{"DATE-OBS", "2026-12-04T17:37:00.123", "UTC"}, "DATE-OBS= '2026-12-04T17:37:00.123' / UTC"},
	} {
		got, err := tc.c.format()
		if err != nil {
			t.Fatalf("%s: %v", tc.c.Key, err)
		}
		if len(got) != fitsCard {
			t.Errorf("%s: %d characters, want 80", tc.c.Key, len(got))
		}
		if strings.TrimRight(got, " ") != tc.want {
			t.Errorf("card\n got %q\nwant %q", strings.TrimRight(got, " "), tc.want)
		}
	}
	// Floats read back as the same float64 (a longitude computed from the
	// clock, -127.24999999999999, once came back as -127.25 with 15 digits).
	for _, x := range []float64{(0.5 - (8 + 59.0/60)) * 15, 0.1 + 0.2, -1.0 / 3, 6.02214076e23, -2.5e-300} {
		got, err := card{"X", x, ""}.format()
		if err != nil {
			t.Fatal(err)
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(got[10:30]), 64)
		if err != nil || v != x {
			t.Errorf("%v written as %q, reads back as %v (%v)", x, got[10:30], v, err)
		}
	}
	for _, bad := range []card{{"lower", 1, ""}, {"TOOLONGKEY", 1, ""}, {"X", "tab\there", ""}, {"X", struct{}{}, ""}} {
		if _, err := bad.format(); err == nil {
			t.Errorf("%+v accepted", bad)
		}
	}
}

// synthetic builds a primary HDU with n header cards before END and a data
// unit of one block (2880 8-bit values).
func synthetic(n int) []byte {
	var b bytes.Buffer
	pad := func(s string) string { return s + strings.Repeat(" ", fitsCard-len(s)) }
	b.WriteString(pad("SIMPLE  =                    T"))
	b.WriteString(pad("BITPIX  =                    8"))
	b.WriteString(pad("NAXIS   =                    1"))
	b.WriteString(pad("NAXIS1  =                 2880"))
	b.WriteString(pad("OBJECT  = 'Unknown '"))
	for i := 5; i < n; i++ {
		b.WriteString(pad("COMMENT filler"))
	}
	b.WriteString(pad("END"))
	for b.Len()%fitsBlock != 0 {
		b.WriteByte(' ')
	}
	data := bytes.Repeat([]byte{0xAB}, fitsBlock)
	b.Write(data)
	return b.Bytes()
}

func TestEditHeader(t *testing.T) {
	// 35 cards + END fill the first block exactly: one more card needs a
	// second header block (FITS 4.0 sect. 3.3.1).
	in := synthetic(35)
	if len(in) != 2*fitsBlock {
		t.Fatalf("synthetic file %d bytes", len(in))
	}
	out, err := editHeader(in, []card{
		{"OBJECT", "Invented Nebula", "target name"},
		{"FILTER", "L", ""},
		{"EXPTIME", 1.5, "s"},
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(out)%fitsBlock != 0 || len(out) != 3*fitsBlock {
		t.Fatalf("edited file %d bytes, want 3 blocks", len(out))
	}
	if !bytes.Equal(out[2*fitsBlock:], in[fitsBlock:]) {
		t.Error("data unit changed")
	}
	for key, want := range map[string]string{"OBJECT": "Invented Nebula", "FILTER": "L", "EXPTIME": "1.5", "BITPIX": "8"} {
		if got, ok := headerValue(out, key); !ok || got != want {
			t.Errorf("%s = %q (%v), want %q", key, got, ok, want)
		}
	}
	if n := bytes.Count(out[:2*fitsBlock], []byte("OBJECT  =")); n != 1 {
		t.Errorf("%d OBJECT cards, want the old one replaced", n)
	}
	if _, err := editHeader([]byte("not fits"), nil); err == nil {
		t.Error("garbage accepted")
	}
}

// An edited file read back by an outside FITS reader: astropy.io.fits
// (Debian's python3-astropy, 5.2.1 here) with output_verify="exception",
// which rejects cards that break the standard.
func TestEditHeaderReadByAstropy(t *testing.T) {
	py := testenv.LookPath(t, "python3", "python3-astropy", "/usr/bin")
	if err := exec.Command(py, "-c", "import astropy.io.fits").Run(); err != nil {
		testenv.Missing(t, "python3-astropy", "python3 cannot import astropy.io.fits")
	}
	out, err := editHeader(synthetic(35), []card{
		{"OBJECT", "Invented O'Nebula", "target name"},
		{"FILTER", "L", "filter name"},
		{"EXPTIME", 1.5, "[s] exposure time"},
		{"DATE-OBS", "2026-12-04T23:00:01.250", "UTC start of the exposure"},
		{"RA", 83.822083333, "[deg]"},
		{"DEC", -5.391111111, "[deg]"},
		{"AIRMASS", 1.2345, ""},
		{"SITELONG", -70.5, "[deg] east positive"},
		{"FRAMENO", 12, ""},
		{"BLOCKID", "blk-0123456789abcdef01234567", "nightloom block id"},
	})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "f.fits")
	if err := os.WriteFile(path, out, 0o644); err != nil {
		t.Fatal(err)
	}
	script := `import sys, json
from astropy.io import fits
with fits.open(sys.argv[1]) as h:
    h.verify("exception")
    hd = h[0].header
    print(json.dumps({k: hd[k] for k in ["OBJECT", "FILTER", "EXPTIME", "DATE-OBS", "RA", "DEC", "AIRMASS", "SITELONG", "FRAMENO", "BLOCKID", "BITPIX"]}))
`
	b, err := exec.Command(py, "-c", script, path).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy rejected the file: %v\n%s", err, b)
	}
	var got map[string]any
	if err := json.Unmarshal(b, &got); err != nil {
		t.Fatalf("%v: %s", err, b)
	}
	want := map[string]any{"OBJECT": "Invented O'Nebula", "FILTER": "L", "EXPTIME": 1.5, "DATE-OBS": "2026-12-04T23:00:01.250",
		"RA": 83.822083333, "DEC": -5.391111111, "AIRMASS": 1.2345, "SITELONG": -70.5, "FRAMENO": 12.0,
		"BLOCKID": "blk-0123456789abcdef01234567", "BITPIX": 8.0}
	for k, w := range want {
		if got[k] != w {
			t.Errorf("astropy reads %s = %v, want %v", k, got[k], w)
		}
	}
}
