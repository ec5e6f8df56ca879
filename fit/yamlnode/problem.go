package yamlnode

import (
	"fmt"
	"strconv"
	"strings"
	"unicode/utf8"
)

// Problem is one thing wrong with a YAML file: the model spec's and the
// daemon config's problems are Problems.
type Problem struct {
	// Line is the line of the file the problem is on, counting from 1, or
	// 0 when unknown.
	Line int `json:"line,omitempty"`
	// Path locates the key or section at fault ("terms[2]",
	// "models[1].schedule"; list entries count from 0), "" for the top
	// level.
	Path string `json:"path,omitempty"`
	// Message says what is wrong and what to do.
	Message string `json:"message"`
}

// String formats the problem as "line N: PATH: MESSAGE", leaving out what
// is unknown or empty.
func (p Problem) String() string {
	var b strings.Builder
	if p.Line > 0 {
		fmt.Fprintf(&b, "line %d: ", p.Line)
	}
	if p.Path != "" {
		b.WriteString(p.Path + ": ")
	}
	b.WriteString(p.Message)
	return b.String()
}

// Syntax turns the YAML reader's error for data into a Problem at the
// line it names (the reader gives the line where the construct it was
// reading began, so the mistake is there or after it), or at the line of
// the first character YAML does not allow.
func Syntax(err error, data []byte) Problem {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	if rest, ok := strings.CutPrefix(msg, "line "); ok {
		if num, after, ok := strings.Cut(rest, ": "); ok {
			if n, err := strconv.Atoi(num); err == nil {
				return Problem{Line: n, Message: "not valid YAML: " + after + " (the mistake is on this line or after it)"}
			}
		}
	}
	if line := badCharLine(data); line > 0 {
		return Problem{Line: line, Message: "not valid YAML: " + msg + " (this line holds a control character or bytes that are not UTF-8)"}
	}
	if strings.Contains(msg, "end of stream") {
		msg += ": a quote or bracket is not closed"
	}
	return Problem{Message: "not valid YAML: " + msg}
}

// badCharLine returns the line of the first character YAML does not allow
// (a control character other than tab and line breaks, or invalid UTF-8),
// or 0 if there is none.
func badCharLine(data []byte) int {
	line := 1
	for i := 0; i < len(data); {
		r, size := utf8.DecodeRune(data[i:])
		switch {
		case r == '\n':
			line++
		case r == '\t' || r == '\r' || r == 0x85:
		case r == utf8.RuneError && size == 1, r < 0x20, r >= 0x7f && r < 0xa0, r == 0xfffe, r == 0xffff:
			return line
		}
		i += size
	}
	return 0
}
