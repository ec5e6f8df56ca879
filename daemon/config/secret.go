package config

import (
	"encoding/json"
	"fmt"
	"log/slog"
)

// redacted is what a set Secret shows instead of its value.
const redacted = "[redacted]"

// Secret holds a value that must never be printed or logged: the database
// connection string (it may carry a password) and webhook signing secrets.
// Every way of formatting it — fmt's verbs including %v, %+v and %#v, JSON,
// YAML and slog — shows "[redacted]" (or nothing for an empty Secret);
// Reveal gives the value to the code that needs it.
//
// The value sits in an unexported field, so that reflection-based encoders
// that ignore the methods below still cannot reach it.
type Secret struct {
	value string
}

// NewSecret wraps v.
func NewSecret(v string) Secret { return Secret{value: v} }

// Reveal returns the value. Call it only where the value is used (to
// connect, to sign), never to print.
func (s Secret) Reveal() string { return s.value }

// IsZero says whether the secret is empty.
func (s Secret) IsZero() bool { return s.value == "" }

// String shows "[redacted]", or "" for an empty secret.
func (s Secret) String() string {
	if s.value == "" {
		return ""
	}
	return redacted
}

// GoString is what %#v shows: no value either.
func (s Secret) GoString() string {
	if s.value == "" {
		return "config.Secret{}"
	}
	return `config.Secret{"` + redacted + `"}`
}

// Format makes every fmt verb (%d and %x included) show String, so that no
// verb can reach the value through reflection.
func (s Secret) Format(f fmt.State, verb rune) {
	if verb == 'v' && f.Flag('#') {
		f.Write([]byte(s.GoString()))
		return
	}
	f.Write([]byte(s.String()))
}

// MarshalJSON encodes the redacted form.
func (s Secret) MarshalJSON() ([]byte, error) { return json.Marshal(s.String()) }

// MarshalYAML encodes the redacted form.
func (s Secret) MarshalYAML() (any, error) { return s.String(), nil }

// MarshalText encodes the redacted form (for encoders that use
// encoding.TextMarshaler, such as slog's JSON handler for map keys).
func (s Secret) MarshalText() ([]byte, error) { return []byte(s.String()), nil }

// LogValue makes slog log the redacted form.
func (s Secret) LogValue() slog.Value { return slog.StringValue(s.String()) }
