package main

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
)

// predictWriter copies the input rows to the output with their predictions.
//
// The engine reads the input through csvsource, which parses only the
// columns the model needs. To copy every column, predictWriter reads the
// same file a second time, record by record, in step with the engine's
// blocks: both readers parse the file the same way, so the n-th record of
// one is the n-th row of the other, and the line each starts on is checked
// to be sure. Memory stays flat: one block of the engine's, one record here.
type predictWriter struct {
	name string
	f    *os.File
	in   *csv.Reader
	out  *csv.Writer
	row  []string
}

// newPredictWriter opens path for the raw records and writes the output
// header: the input's columns, then predictColumns.
func newPredictWriter(path string, w io.Writer) (*predictWriter, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	// Read as csvsource reads: past a UTF-8 byte-order mark, with leading
	// spaces trimmed (so that `1, "a,b"` is two fields), one record a time.
	br := bufio.NewReaderSize(f, 64<<10)
	if start, _ := br.Peek(3); bytes.Equal(start, []byte{0xEF, 0xBB, 0xBF}) {
		br.Discard(3)
	}
	in := csv.NewReader(br)
	in.ReuseRecord = true
	in.TrimLeadingSpace = true
	header, err := in.Read()
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("%s: cannot read the header: %w", path, err)
	}
	in.FieldsPerRecord = len(header)
	pw := &predictWriter{name: path, f: f, in: in, out: csv.NewWriter(w)}
	for _, h := range header {
		pw.row = append(pw.row, strings.TrimSpace(h))
	}
	pw.row = append(pw.row, predictColumns...)
	if err := pw.out.Write(pw.row); err != nil {
		pw.close()
		return nil, err
	}
	return pw, nil
}

// write copies the rows of one block of predictions to the output.
func (pw *predictWriter) write(p fit.Prediction, t *predictTally) error {
	for r := range p.Block.Rows {
		rec, err := pw.in.Read()
		if err != nil {
			return fmt.Errorf("%s: reading the rows again: %w", pw.name, err)
		}
		line, _ := pw.in.FieldPos(0)
		want := int64(r + 1)
		if p.Block.Line != nil {
			want = p.Block.Line[r]
		}
		if int64(line) != want {
			return fmt.Errorf("%s changed while it was being read (line %d read as line %d); run again when nothing writes to it", pw.name, want, line)
		}
		pw.row = append(pw.row[:0], rec...)
		if p.Missing[r] {
			pw.row = append(pw.row, "", "", "")
		} else {
			pw.row = append(pw.row, number(p.Link[r]), number(p.LinkSE[r]), number(p.Response[r]))
		}
		if err := pw.out.Write(pw.row); err != nil {
			return err
		}
		t.add(want, p.Missing[r], p.OutOfRange[r])
	}
	return nil
}

// number formats a prediction with the fewest digits that read back as the
// same float64.
func number(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return ""
	}
	return strconv.FormatFloat(x, 'g', -1, 64)
}

// flush checks the input is used up and writes out what is buffered.
func (pw *predictWriter) flush() error {
	if _, err := pw.in.Read(); err != io.EOF {
		return fmt.Errorf("%s changed while it was being read (it has more rows than were predicted); run again when nothing writes to it", pw.name)
	}
	pw.out.Flush()
	return pw.out.Error()
}

func (pw *predictWriter) close() { pw.f.Close() }
