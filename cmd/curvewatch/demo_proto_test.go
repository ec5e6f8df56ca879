package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func protoCSV(rows []reading) string {
	var b strings.Builder
	b.WriteString("observed_at,site,water_temp,flow,hour,dissolved_oxygen\n")
	for _, r := range rows {
		fmt.Fprintf(&b, "%s,%s,%.3f,%.3f,%.4f,%.3f\n", r.observed.Format(time.RFC3339), r.site, r.temp, r.flow, r.hour, r.oxygen)
	}
	return b.String()
}

const protoModel = `name: river-oxygen
response: dissolved_oxygen
family: gaussian
terms:
  - curve: water_temp
    by: site
    size: 8
  - curve: flow
    size: 6
  - curve: hour
    basis: cyclic
    period: [0, 24]
    size: 8
  - factor: site
watch:
  practical_shift: 0.5
  level: 0.99
`

func TestProto(t *testing.T) {
	for _, win := range []int{25, 50} {
		dir := t.TempDir()
		os.WriteFile(filepath.Join(dir, "m.yaml"), []byte(protoModel), 0o644)
		start := time.Date(2025, 7, 1, 0, 0, 0, 0, time.UTC)
		rv := newRiver(1, start)
		hours := func(n int, from time.Time) (rows []reading) {
			for i := range n {
				rows = append(rows, rv.hour(from.Add(time.Duration(i)*time.Hour))...)
			}
			return
		}
		base := hours(168, start)
		os.WriteFile(filepath.Join(dir, "base.csv"), []byte(protoCSV(base)), 0o644)
		cli(t, "fit", "--data", filepath.Join(dir, "base.csv"), "--model", filepath.Join(dir, "m.yaml"), "--out", filepath.Join(dir, "base.json"))
		now := start.Add(168 * time.Hour)
		falseB, hits := 0, 0
		for k := range 40 {
			if k == 30 {
				rv.foulAt = now
			}
			rows := hours(win, now)
			now = now.Add(time.Duration(win) * time.Hour)
			name := fmt.Sprintf("w%d", k)
			os.WriteFile(filepath.Join(dir, name+".csv"), []byte(protoCSV(rows)), 0o644)
			r := cli(t, "fit", "--data", filepath.Join(dir, name+".csv"), "--model", filepath.Join(dir, "m.yaml"), "--out", filepath.Join(dir, name+".json"))
			if r.code != 0 {
				t.Fatal(r.stderr)
			}
			r = cli(t, "compare", "--reference", filepath.Join(dir, "base.json"), "--candidate", filepath.Join(dir, name+".json"), "--out", filepath.Join(dir, name+"-rep.json"), "--data", filepath.Join(dir, name+".csv"))
			res := ""
			for _, l := range strings.Split(r.stdout, "\n") {
				if strings.Contains(l, "result") || strings.Contains(l, "SHIFTED") || strings.Contains(l, "noise") || strings.Contains(l, "prediction") {
					res += l + "\n"
				}
			}
			if r.code == 3 {
				if k < 30 {
					falseB++
				} else {
					hits++
				}
			}
			t.Logf("win %d k %d code %d\n%s", win, k, r.code, res)
		}
		t.Logf("WIN %d: false breaches %d/30, hits %d/10", win, falseB, hits)
	}
}
