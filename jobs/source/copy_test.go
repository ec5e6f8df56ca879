package source

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"
)

// copyStream writes a binary COPY stream (header, rows, trailer) as the
// PostgreSQL manual's "Binary Format" section describes it. A nil field
// is NULL; a float64 is double precision; a string is text.
func copyStream(rows [][]any) []byte {
	var b bytes.Buffer
	b.Write(copySignature)
	binary.Write(&b, binary.BigEndian, uint32(0)) // flags
	binary.Write(&b, binary.BigEndian, uint32(0)) // header extension length
	for _, row := range rows {
		binary.Write(&b, binary.BigEndian, int16(len(row)))
		for _, v := range row {
			switch v := v.(type) {
			case nil:
				binary.Write(&b, binary.BigEndian, int32(-1))
			case float64:
				binary.Write(&b, binary.BigEndian, int32(8))
				binary.Write(&b, binary.BigEndian, math.Float64bits(v))
			case string:
				binary.Write(&b, binary.BigEndian, int32(len(v)))
				b.WriteString(v)
			}
		}
	}
	binary.Write(&b, binary.BigEndian, int16(-1))
	return b.Bytes()
}

// decodeAll feeds stream to a columnReader in pieces of size piece and
// returns the rows it flushed, one line per row.
func decodeAll(stream []byte, nNum, nText, block, piece int) ([]string, error) {
	var out []string
	cr := newColumnReader(nNum, nText, block, func(rows int, num [][]float64, txt [][]string) error {
		for r := range rows {
			var f []string
			for _, c := range num {
				f = append(f, fmt.Sprint(c[r]))
			}
			for _, c := range txt {
				f = append(f, fmt.Sprintf("%q", c[r]))
			}
			out = append(out, strings.Join(f, " "))
		}
		return nil
	})
	for len(stream) > 0 {
		n := min(piece, len(stream))
		if _, err := cr.Write(stream[:n]); err != nil {
			return out, err
		}
		stream = stream[n:]
	}
	return out, cr.Close()
}

func TestColumnReader(t *testing.T) {
	good := copyStream([][]any{
		{1.5, -2.0, "S05"},
		{nil, math.Inf(1), ""},
		{3.25, 0.0, nil},
		{math.NaN(), 7.0, "Zürich"},
	})
	want := []string{`1.5 -2 "S05"`, `NaN +Inf ""`, `3.25 0 ""`, `NaN 7 "Zürich"`}
	tests := []struct {
		name    string
		stream  []byte
		nNum    int
		nText   int
		want    []string
		wantErr string
	}{
		{name: "rows, NULLs and special values", stream: good, nNum: 2, nText: 1, want: want},
		{name: "no rows", stream: copyStream(nil), nNum: 2, nText: 1},
		{name: "no columns", stream: copyStream([][]any{{}, {}}), want: []string{"", ""}},
		{name: "wrong signature", stream: append([]byte("PGCOPX"), good[6:]...), nNum: 2, nText: 1, wantErr: "signature"},
		{name: "too few fields", stream: copyStream([][]any{{1.0, "a"}}), nNum: 2, nText: 1, wantErr: "row 1 has 2 fields, want 3"},
		{name: "a number of 4 bytes", stream: func() []byte {
			s := copyStream([][]any{{"abcd", 1.0, "x"}})
			return s
		}(), nNum: 2, nText: 1, wantErr: "4 bytes for a double precision value"},
		{name: "cut short inside a row", stream: good[:len(good)-7], nNum: 2, nText: 1, wantErr: "ended inside a row"},
		{name: "no trailer", stream: good[:len(good)-2], nNum: 2, nText: 1, wantErr: "ended inside a row"},
		{name: "only part of the header", stream: good[:9], nNum: 2, nText: 1, wantErr: "before its header"},
		{name: "data after the trailer", stream: append(append([]byte(nil), good...), 0, 1), nNum: 2, nText: 1, wantErr: "after the trailer"},
		{name: "negative field length", stream: func() []byte {
			s := copyStream([][]any{{1.0, 2.0, "x"}})
			binary.BigEndian.PutUint32(s[19+2:], uint32(0xfffffff0))
			return s
		}(), nNum: 2, nText: 1, wantErr: "field of length"},
	}
	for _, tc := range tests {
		for _, piece := range []int{1, 3, 7, 64, 1 << 20} {
			for _, block := range []int{1, 2, 1000} {
				t.Run(fmt.Sprintf("%s/piece %d/block %d", tc.name, piece, block), func(t *testing.T) {
					got, err := decodeAll(tc.stream, tc.nNum, tc.nText, block, piece)
					if tc.wantErr != "" {
						if err == nil || !strings.Contains(err.Error(), tc.wantErr) {
							t.Fatalf("error %v, want one saying %q", err, tc.wantErr)
						}
						return
					}
					if err != nil {
						t.Fatal(err)
					}
					if strings.Join(got, "\n") != strings.Join(tc.want, "\n") {
						t.Errorf("rows\n%s\nwant\n%s", strings.Join(got, "\n"), strings.Join(tc.want, "\n"))
					}
				})
			}
		}
	}
}

// A flush that fails stops the decoding, but the rest of the stream is
// still accepted (so the connection stays usable) and Close reports it.
func TestColumnReaderStopsAtAFailedFlush(t *testing.T) {
	stream := copyStream([][]any{{1.0}, {2.0}, {3.0}, {4.0}, {5.0}})
	calls := 0
	stop := fmt.Errorf("the fit gave up")
	cr := newColumnReader(1, 0, 2, func(rows int, num [][]float64, txt [][]string) error {
		calls++
		return stop
	})
	for i := range stream {
		if n, err := cr.Write(stream[i : i+1]); n != 1 || err != nil {
			t.Fatalf("write %d: %d, %v", i, n, err)
		}
	}
	if err := cr.Close(); err != stop {
		t.Errorf("Close: %v, want the flush's error", err)
	}
	if calls != 1 {
		t.Errorf("flush called %d times, want 1", calls)
	}
}

// FuzzColumnReader: no input panics, and feeding a stream in pieces gives
// what feeding it whole gives.
func FuzzColumnReader(f *testing.F) {
	f.Add(copyStream([][]any{{1.5, "a"}, {nil, nil}}), uint8(3))
	f.Add(copyStream(nil), uint8(1))
	f.Add([]byte("PGCOPY\n\xff\r\n\x00\x00\x00\x00\x00\x00\x00\x00\x00"), uint8(2))
	f.Fuzz(func(t *testing.T, stream []byte, piece uint8) {
		whole, errWhole := decodeAll(stream, 1, 1, 3, len(stream)+1)
		parts, errParts := decodeAll(stream, 1, 1, 3, int(piece)+1)
		if (errWhole == nil) != (errParts == nil) {
			t.Fatalf("whole: %v; in pieces of %d: %v", errWhole, int(piece)+1, errParts)
		}
		if errWhole == nil && strings.Join(whole, "\n") != strings.Join(parts, "\n") {
			t.Fatalf("whole and in pieces differ:\n%q\n%q", whole, parts)
		}
	})
}

func TestSortedOrder(t *testing.T) {
	nan := math.NaN()
	tests := []struct {
		name string
		time []float64
		val  []float64
		txt  []string
		want []int32
	}{
		{"rising", []float64{1, 2, 3, 4}, []float64{9, 8, 7, 6}, []string{"a", "b", "c", "d"}, []int32{0, 1, 2, 3}},
		{"falling", []float64{4, 3, 2, 1}, []float64{9, 8, 7, 6}, []string{"a", "b", "c", "d"}, []int32{3, 2, 1, 0}},
		{"ties broken by value, NaN last", []float64{2, 1, 2, 2}, []float64{nan, 5, 3, 1}, []string{"a", "b", "c", "d"}, []int32{1, 3, 2, 0}},
		{"then by text, bytewise", []float64{1, 1, 1}, []float64{nan, nan, nan}, []string{"b", "B", "ä"}, []int32{1, 0, 2}},
		{"one row", []float64{7}, []float64{1}, []string{""}, []int32{0}},
		{"no rows", nil, nil, nil, []int32{}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := sortedOrder(len(tc.time), [][]float64{tc.val, tc.time}, [][]string{tc.txt}, 1)
			if fmt.Sprint(got) != fmt.Sprint(tc.want) {
				t.Errorf("order %v, want %v", got, tc.want)
			}
		})
	}
}

func TestTimeLiteral(t *testing.T) {
	tests := []struct {
		in   time.Time
		want string
	}{
		{time.Date(2026, 3, 1, 10, 20, 30, 123456000, time.UTC), "'2026-03-01T10:20:30.123456Z'::timestamptz"},
		{time.Date(2026, 3, 1, 10, 20, 30, 0, time.FixedZone("", 2*3600)), "'2026-03-01T08:20:30Z'::timestamptz"},
		{time.Date(-40, 1, 1, 0, 0, 0, 0, time.UTC), "'0001-01-01T00:00:00Z'::timestamptz"},
		{time.Date(12000, 1, 1, 0, 0, 0, 0, time.UTC), "'9999-12-31T23:59:59.999999Z'::timestamptz"},
	}
	for _, tc := range tests {
		if got := timeLiteral(tc.in); got != tc.want {
			t.Errorf("timeLiteral(%v) = %s, want %s", tc.in, got, tc.want)
		}
	}
}
