package constraints

import (
	"encoding/csv"
	"io"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"
)

type skyCase struct {
	utc                     time.Time
	lat, lon, elev, ra, dec float64
	moonSep, sunSep         float64
}

// readSkyCases reads testdata/ephem/sky_cases.csv (see its README).
func readSkyCases(t *testing.T) []skyCase {
	t.Helper()
	f, err := os.Open("../testdata/ephem/sky_cases.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	head, err := r.Read()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, h := range head {
		col[strings.TrimSpace(h)] = i
	}
	var out []skyCase
	for {
		rec, err := r.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		num := func(name string) float64 {
			x, err := strconv.ParseFloat(rec[col[name]], 64)
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			return x
		}
		utc, err := time.Parse(time.RFC3339Nano, rec[col["utc"]])
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, skyCase{utc, num("lat_deg"), num("lon_deg"), num("elev_m"), num("star_ra_deg"),
			num("star_dec_deg"), num("star_moon_sep_deg"), num("star_sun_sep_deg")})
	}
	return out
}
