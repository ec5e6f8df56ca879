package source

// This file reads PostgreSQL's binary COPY format ("Binary Format" in the
// COPY chapter of the PostgreSQL manual): rows cost the server a message
// each either way, but here the client decodes each value with a load and
// a byte swap instead of a scan plan per value.

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
)

// copySignature opens every binary COPY stream.
var copySignature = []byte("PGCOPY\n\xff\r\n\x00")

// columnReader decodes a binary COPY stream of rows whose first len(num)
// fields are double precision and whose other len(txt) fields are text,
// as an io.Writer that the COPY's data is written to in pieces of any
// size. Each complete block of block rows (and the last, shorter one, at
// Close) goes to flush; the slices are reused after flush returns. Once
// flush fails, the rest of the stream is read and dropped (so that the
// connection stays usable) and Close returns flush's error.
type columnReader struct {
	num   [][]float64
	txt   [][]string
	block int
	flush func(rows int, num [][]float64, txt [][]string) error

	rows    int // rows in the current block
	total   int // rows decoded
	header  bool
	trailer bool
	pending []byte // an incomplete piece kept for the next Write
	err     error  // the stream is malformed
	stop    error  // flush failed: the rest is dropped
}

func newColumnReader(nNum, nText, block int, flush func(rows int, num [][]float64, txt [][]string) error) *columnReader {
	c := &columnReader{num: make([][]float64, nNum), txt: make([][]string, nText), block: block, flush: flush}
	for i := range c.num {
		c.num[i] = make([]float64, 0, min(block, 4096))
	}
	for i := range c.txt {
		c.txt[i] = make([]string, 0, min(block, 4096))
	}
	return c
}

// Write decodes every complete row in p (with what an earlier Write left).
func (c *columnReader) Write(p []byte) (int, error) {
	if c.err != nil {
		return 0, c.err
	}
	if c.stop != nil {
		return len(p), nil
	}
	data := p
	if len(c.pending) > 0 {
		c.pending = append(c.pending, p...)
		data = c.pending
	}
	used, err := c.decode(data)
	if err != nil {
		c.err = err
		return 0, err
	}
	if c.stop != nil {
		c.pending = nil
		return len(p), nil
	}
	rest := data[used:]
	if len(c.pending) > 0 {
		c.pending = c.pending[:copy(c.pending, rest)]
	} else {
		c.pending = append(c.pending, rest...)
	}
	return len(p), nil
}

// Close checks the stream ended with its trailer and flushes the last
// block.
func (c *columnReader) Close() error {
	if c.err != nil {
		return c.err
	}
	if c.stop != nil {
		return c.stop
	}
	switch {
	case !c.header:
		return errors.New("binary COPY: the stream ended before its header")
	case len(c.pending) > 0 || !c.trailer:
		return errors.New("binary COPY: the stream ended inside a row")
	}
	if c.rows > 0 {
		return c.emit()
	}
	return nil
}

// decode reads the header and whole rows from data, and returns how many
// bytes it used.
func (c *columnReader) decode(data []byte) (int, error) {
	at := 0
	if !c.header {
		const fixed = 11 + 4 + 4
		if len(data) < fixed {
			return 0, nil
		}
		if !bytes.Equal(data[:11], copySignature) {
			return 0, errors.New("binary COPY: the stream does not start with the PGCOPY signature")
		}
		if flags := binary.BigEndian.Uint32(data[11:15]); flags&(1<<16) != 0 {
			return 0, errors.New("binary COPY: the stream carries OIDs, which curvewatch does not ask for")
		}
		ext := int(binary.BigEndian.Uint32(data[15:19]))
		if ext < 0 || ext > 1<<20 {
			return 0, fmt.Errorf("binary COPY: header extension of %d bytes", ext)
		}
		if len(data) < fixed+ext {
			return 0, nil
		}
		at = fixed + ext
		c.header = true
	}
	want := len(c.num) + len(c.txt)
	for at < len(data) {
		if c.trailer {
			return 0, errors.New("binary COPY: data after the trailer")
		}
		if len(data)-at < 2 {
			return at, nil
		}
		fields := int(int16(binary.BigEndian.Uint16(data[at:])))
		if fields == -1 {
			c.trailer = true
			at += 2
			continue
		}
		if fields != want {
			return 0, fmt.Errorf("binary COPY: row %d has %d fields, want %d", c.total+1, fields, want)
		}
		end, ok, err := c.row(data, at+2)
		if err != nil {
			return 0, err
		}
		if !ok {
			return at, nil // the row is not complete yet
		}
		at = end
		c.rows++
		c.total++
		if c.rows == c.block {
			if err := c.emit(); err != nil {
				c.stop = err
				return at, nil
			}
		}
	}
	return at, nil
}

// row decodes the fields of one row starting at data[at:]. ok is false,
// with nothing appended, when the row is not all in data yet.
func (c *columnReader) row(data []byte, at int) (end int, ok bool, err error) {
	// First make sure the whole row is here, then append its values.
	pos := at
	for range len(c.num) + len(c.txt) {
		if len(data)-pos < 4 {
			return 0, false, nil
		}
		n := int(int32(binary.BigEndian.Uint32(data[pos:])))
		pos += 4
		if n == -1 {
			continue
		}
		if n < 0 {
			return 0, false, fmt.Errorf("binary COPY: row %d has a field of length %d", c.total+1, n)
		}
		if len(data)-pos < n {
			return 0, false, nil
		}
		pos += n
	}
	pos = at
	for i := range c.num {
		n := int(int32(binary.BigEndian.Uint32(data[pos:])))
		pos += 4
		v := math.NaN() // NULL
		if n >= 0 {
			if n != 8 {
				return 0, false, fmt.Errorf("binary COPY: row %d, field %d: %d bytes for a double precision value", c.total+1, i+1, n)
			}
			v = math.Float64frombits(binary.BigEndian.Uint64(data[pos:]))
			pos += 8
		}
		c.num[i] = append(c.num[i], v)
	}
	for i := range c.txt {
		n := int(int32(binary.BigEndian.Uint32(data[pos:])))
		pos += 4
		s := "" // NULL
		if n >= 0 {
			s = string(data[pos : pos+n])
			pos += n
		}
		c.txt[i] = append(c.txt[i], s)
	}
	return pos, true, nil
}

// emit hands the current block to flush and starts the next.
func (c *columnReader) emit() error {
	if err := c.flush(c.rows, c.num, c.txt); err != nil {
		return err
	}
	c.rows = 0
	for i := range c.num {
		c.num[i] = c.num[i][:0]
	}
	for i := range c.txt {
		c.txt[i] = c.txt[i][:0]
	}
	return nil
}
