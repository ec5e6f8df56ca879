package config

import (
	"errors"
	"strings"
	"testing"
)

// expandCase holds a config head and a model, so that each case needs
// only its own lines.
const expandModel = `models:
  - name: s1
    schedule: "@hourly"
    source: {table: r, time: t, window: 1d}
    spec: {response: y, terms: [{curve: x}]}
`

func TestExpand(t *testing.T) {
	env := map[string]string{
		"DB":      "host=h dbname=db password='p#w: {1}'", // YAML-special characters stay inside the value
		"SCHEMA":  "river_watch",
		"LEVEL":   "0.95",
		"RUNS":    "3",
		"AGAINST": "previous",
		"HOST":    "127.0.0.1",
		"NESTED":  "${DB}",
		"SITE":    "S07",
	}
	c, err := Parse(strings.NewReader(`database: ${DB}
schema: ${SCHEMA}
listen: "${HOST}:9464"
models:
  - name: s1
    schedule: "@hourly"
    source:
      table: r
      time: t
      window: 1d
      where: |
        site = '${SITE}' AND note <> '$${literal}' AND price < $5
        AND tag = '${NESTED}'
    watch:
      confirm_runs: ${RUNS}
      level: "${LEVEL}"
      against: ${AGAINST}
    spec: {response: y, terms: [{curve: x}]}
    max_age: 1h
`), ParseOptions{Getenv: getenv(env)})
	if err != nil {
		t.Fatal(err)
	}
	m := c.Models[0]
	checks := []struct{ name, got, want string }{
		{"database", c.Database.Reveal(), env["DB"]},
		{"schema", c.Schema, "river_watch"},
		{"listen", c.Listen, "127.0.0.1:9464"},
		{"where", m.Source.Where, "site = 'S07' AND note <> '${literal}' AND price < $5\nAND tag = '${DB}'"},
		{"against", m.Watch.Against, "previous"},
	}
	for _, c := range checks {
		if c.got != c.want {
			t.Errorf("%s = %q, want %q", c.name, c.got, c.want)
		}
	}
	if m.Watch.Level != 0.95 || m.Watch.ConfirmRuns != 3 {
		t.Errorf("numbers from the environment: level %v, confirm_runs %v; want 0.95, 3", m.Watch.Level, m.Watch.ConfirmRuns)
	}
}

func TestExpandProblems(t *testing.T) {
	cases := []struct {
		name, in string
		env      map[string]string
		want     []string // the problems, in order
	}{
		{"unset", "database: ${NOPE}\n" + expandModel, nil,
			[]string{"line 1: database: environment variable NOPE is not set (or is empty)"}},
		{"empty", "database: ${EMPTY}\n" + expandModel, map[string]string{"EMPTY": ""},
			[]string{"line 1: database: environment variable EMPTY is not set"}},
		{"two in one value", "database: \"${A}x${B}\"\n" + expandModel, nil,
			[]string{"line 1: database: environment variable A", "line 1: database: environment variable B"}},
		{"bad name", "database: ${1DB}\n" + expandModel, nil,
			[]string{"line 1: database: ${1DB} is not an environment variable reference"}},
		{"unclosed", "database: postgres://h/db\nlisten: ${HOST:9464\n" + expandModel, nil,
			[]string{`line 2: listen: "${HOST:9464" opens ${ without a closing }`}},
		{"block scalar line", "database: postgres://h/db\n" + strings.Replace(expandModel, "window: 1d}", "window: 1d, where: \"a = 1\"}", 1) +
			"    watch:\n      against: |\n        previous\n        ${WHICH}\n", nil,
			[]string{"line 10: models[0].watch.against: environment variable WHICH"}},
		{"in spec", "database: postgres://h/db\n" + strings.Replace(expandModel, "curve: x", `curve: "${COLUMN}"`, 1), nil,
			[]string{"line 6: models[0].spec.terms[0].curve: environment variable COLUMN"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse(strings.NewReader(c.in), ParseOptions{Getenv: getenv(c.env)})
			var e *Error
			if !errors.As(err, &e) {
				t.Fatalf("want *Error, got %v", err)
			}
			if len(e.Problems) != len(c.want) {
				t.Fatalf("%d problems, want %d:\n%v", len(e.Problems), len(c.want), err)
			}
			for i, w := range c.want {
				if got := e.Problems[i].String(); !strings.HasPrefix(got, w) {
					t.Errorf("problem %d = %q, want it to start with %q", i, got, w)
				}
			}
		})
	}
}

// A nil Getenv reads the process environment.
func TestExpandDefaultsToEnvironment(t *testing.T) {
	t.Setenv("CURVEWATCH_CONFIG_TEST_DB", "postgres://localhost/river")
	c, err := Parse(strings.NewReader("database: ${CURVEWATCH_CONFIG_TEST_DB}\n"+expandModel), ParseOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if c.Database.Reveal() != "postgres://localhost/river" {
		t.Errorf("database = %q", c.Database.Reveal())
	}
}
