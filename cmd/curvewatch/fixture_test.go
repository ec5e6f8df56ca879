package main

import (
	"bytes"
	"encoding/csv"
	"flag"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"
)

// update rewrites golden files and generated fixtures instead of checking
// them: go test ./cmd/curvewatch -update
var update = flag.Bool("update", false, "rewrite golden files and generated fixtures under testdata/cli")

// cliData is the folder of this package's fixtures, one folder per case.
const cliData = "../../testdata/cli"

// sondeRows generates the river-sonde fixture: three sites, 100 readings
// each, eight hours apart over a month of warming water. It is invented data
// for exercising the commands, not a reference: dissolved oxygen falls
// along a smooth curve as the water warms, rises a little with flow, and
// sits higher or lower by site; low-oxygen alarms (counts) rise with
// temperature. Three rows have a missing value, and one note has a comma.
func sondeRows() []byte {
	r := rand.New(rand.NewPCG(2024, 7))
	normal := func() float64 { // Box–Muller
		u1, u2 := 1-r.Float64(), r.Float64()
		return math.Sqrt(-2*math.Log(u1)) * math.Cos(2*math.Pi*u2)
	}
	poisson := func(mean float64) int { // Knuth's multiplication method
		limit, k, p := math.Exp(-mean), 0, 1.0
		for {
			p *= r.Float64()
			if p <= limit {
				return k
			}
			k++
		}
	}
	sites := []struct {
		name           string
		oxygen, alarms float64 // shifts from site S05
	}{{"S05", 0, 0}, {"S07", -0.6, 0.5}, {"S09", 0.35, -0.3}}
	start := time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC)
	f := func(x float64) string { return strconv.FormatFloat(x, 'f', 2, 64) }

	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.Write([]string{"observed_at", "site", "sonde_id", "water_temp", "flow", "dissolved_oxygen", "low_do_alarms", "note"})
	for i := range 300 {
		site := sites[i%3]
		k := i / 3 // reading number at the site
		at := start.Add(time.Duration(k) * 8 * time.Hour)
		hour := float64(at.Hour())
		temp := math.Max(0.5, 4+20*float64(k)/100+1.5*math.Sin(2*math.Pi*(hour-9)/24)+1.2*normal())
		flow := math.Exp(2.3 + 0.5*normal())
		oxygen := 14.6 - 0.39*temp + 0.0070*temp*temp - 0.00006*temp*temp*temp +
			0.02*flow + site.oxygen + 0.35*normal()
		alarms := poisson(math.Exp(-2.2 + 0.12*(temp-12) - 0.01*flow + site.alarms))
		rec := []string{at.Format(time.RFC3339), site.name, "EXO-" + site.name[1:] + "-A",
			f(temp), f(flow), f(oxygen), strconv.Itoa(alarms), ""}
		switch i {
		case 36:
			rec[4] = "NA"
		case 90:
			rec[7] = "wiper replaced, recalibrated"
		case 150:
			rec[4] = ""
		case 221:
			rec[1] = ""
		}
		w.Write(rec)
	}
	w.Flush()
	return buf.Bytes()
}

// TestSondeFixture keeps testdata/cli/river-sonde/rows.csv what sondeRows
// generates.
func TestSondeFixture(t *testing.T) {
	path := filepath.Join(cliData, "river-sonde", "rows.csv")
	checkGolden(t, path, sondeRows())
}

// checkGolden compares got with the file at path, or rewrites the file
// with -update.
func checkGolden(t *testing.T, path string, got []byte) {
	t.Helper()
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./cmd/curvewatch -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("%s differs from what the test produced (if the change is intended, run go test ./cmd/curvewatch -update)\n--- got\n%s\n--- want\n%s", path, got, want)
	}
}
