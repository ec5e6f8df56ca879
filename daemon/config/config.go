// Package config reads the daemon's config file (DESIGN.md, "Daemon
// config"): the database, the daemon's own schema and listen address,
// alerting, and the models to refit on a schedule.
//
// Parse reads a config from an io.Reader and checks all of it, reporting
// every problem at once as an *Error whose problems each name a line and
// the key at fault; Load reads a file. Unknown keys are errors everywhere.
// Secrets (the database connection string, webhook secrets) are held in a
// Secret, which never prints its value.
package config

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"time"

	// Time zone names resolve the same on every machine, with or without
	// the system's zoneinfo files.
	_ "time/tzdata"

	"github.com/robfig/cron/v3"
	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// Defaults for keys left out.
const (
	DefaultSchema = "curvewatch"
	// MaxSchemaLength is the longest schema name: River, the job queue
	// whose tables share the schema, allows 46 characters.
	MaxSchemaLength = 46
	DefaultListen   = "127.0.0.1:9464"
	DefaultTimezone = "UTC"
	// DefaultOverlap is how far before its watermark a run re-reads rows,
	// to pick up rows that committed late (source.overlap).
	DefaultOverlap = time.Hour
	// DefaultAgainst and the other Default… watch values apply when
	// neither the model's watch section nor its spec's sets the key. The
	// tolerances are fit.DefaultTolerance's.
	DefaultAgainst          = AgainstBaseline
	DefaultPracticalShift   = 0.5
	DefaultLevel            = 0.99
	DefaultDevianceIncrease = 0.15
	DefaultConfirmRuns      = 2
	DefaultFailingRuns      = 3
)

// What a model's new fit is compared with (watch.against).
const (
	// AgainstBaseline compares with the model's pinned baseline fit.
	AgainstBaseline = "baseline"
	// AgainstPrevious compares with the latest earlier fit whose window
	// does not overlap the new one.
	AgainstPrevious = "previous"
)

// maxConfigBytes bounds what Parse reads; a config is a few kilobytes.
const maxConfigBytes = 4 << 20

// Config is the daemon's config.
type Config struct {
	// Database is the PostgreSQL connection string (a postgres:// URL or
	// key=value settings) for the source tables and the daemon's own
	// schema. Required; usually database: ${DATABASE_URL}.
	Database Secret `json:"database"`
	// Schema holds the daemon's own tables (default "curvewatch"):
	// letters, digits and underscores.
	Schema string `json:"schema"`
	// Listen is the host:port of the HTTP server (/metrics, /healthz,
	// /readyz, /api/…, the dashboard); default 127.0.0.1:9464. An empty
	// host listens on every interface.
	Listen string `json:"listen"`
	// Timezone is the IANA name of the zone cron schedules are read in
	// (key timezone; default UTC). See ParseSchedule for what happens at
	// daylight-saving changes.
	Timezone string `json:"timezone"`
	// Location is Timezone loaded.
	Location *time.Location `json:"-"`
	// PublicURL is the address people reach the daemon's dashboard at
	// (key public_url; default http:// + Listen). Alerts link to
	// PublicURL/models/NAME.
	PublicURL string `json:"public_url"`
	// API holds the HTTP API's settings.
	API API `json:"api"`
	// Alerting says where alerts go.
	Alerting Alerting `json:"alerting"`
	// Models are the models to refit, in file order; at least one, with
	// distinct names.
	Models []Model `json:"models"`
	// Lines gives the line of each top-level key read ("database",
	// "schema", "listen", "timezone", "alerting", "models").
	Lines map[string]int `json:"-"`
}

// API holds the HTTP API's settings.
type API struct {
	// Token, when set, allows the API's writes (pinning a baseline) to
	// requests that carry it as a bearer token. Without it the API is read
	// only. Usually token: ${CURVEWATCH_API_TOKEN}.
	Token Secret `json:"token"`
}

// Defaults of the alerting section.
const (
	// DefaultResendEvery is how often firing alerts are re-sent to
	// Alertmanager so that they do not expire.
	DefaultResendEvery = time.Minute
)

// Alerting lists where alerts are delivered. Both lists may be empty: the
// daemon then only records alert states and exports metrics.
type Alerting struct {
	// FDR, when above 0, controls the false discovery rate at this level
	// across the models that share a schedule (Benjamini & Hochberg 1995):
	// a slot's shift findings count as breaches only for the models that
	// are discoveries among all of that slot's comparisons (key fdr; off by
	// default; below 1, e.g. 0.1).
	FDR float64 `json:"fdr,omitempty"`
	// ResendEvery is how often firing alerts are re-sent to Alertmanager
	// (key resend_every; default 1m).
	ResendEvery time.Duration `json:"resend_every"`
	// Alertmanager holds the base URLs (http or https) of Alertmanager
	// instances; each alert goes to every one of them.
	Alertmanager []string `json:"alertmanager,omitempty"`
	// Webhooks receive each alert as a JSON POST.
	Webhooks []Webhook `json:"webhooks,omitempty"`
}

// Webhook is one webhook receiver.
type Webhook struct {
	// URL is where alerts are POSTed (http or https).
	URL string `json:"url"`
	// Secret, when set, signs each delivery; optional.
	Secret Secret `json:"secret"`
}

// Model is one model the daemon refits.
type Model struct {
	// Name identifies the model in metrics (the model label), the API,
	// the history tables and on the command line (--model): 1 to 63
	// letters, digits, '.', '_' and '-', starting with a letter or digit.
	// The spec's own name, if different, is replaced by it.
	Name string `json:"name"`
	// Schedule is the schedule as written: a 5-field cron expression
	// (minute hour day-of-month month day-of-week), a descriptor such as
	// @daily or @hourly, or @every DURATION. See ParseSchedule.
	Schedule string `json:"schedule"`
	// Cron is Schedule parsed, in the config's time zone; nil when the
	// schedule has a problem.
	Cron cron.Schedule `json:"-"`
	// Source says where the model's rows come from.
	Source Source `json:"source"`
	// Spec is the model spec, inline (spec:) or read from SpecFile; nil
	// when it has a problem. Its Name is the model's Name, and its line
	// numbers (Spec.Lines, TermSpec.Line) are lines of the config file
	// for an inline spec and of the spec file otherwise.
	Spec *fit.Spec `json:"spec"`
	// SpecFile is the spec_file key as written ("" for an inline spec);
	// a relative path is read from the config file's folder.
	SpecFile string `json:"spec_file,omitempty"`
	// Watch holds the tolerances for comparing fits: the model's watch
	// section, then its spec's, then the defaults, key by key.
	Watch Watch `json:"watch"`
	// MaxAge, when above 0, raises a data-stopped alert when the newest
	// row of the source (by its time column) is older than this (key
	// max_age; off by default).
	MaxAge time.Duration `json:"max_age,omitempty"`
	// Line is the line of the model's entry in the config file, and Lines
	// the line of each key read: "name", "schedule", "source",
	// "source.table", "source.time", "source.where", "source.window",
	// "source.overlap", "spec", "spec_file", "watch", "max_age".
	Line  int            `json:"-"`
	Lines map[string]int `json:"-"`
}

// Source says where a model's rows come from. Table and Time are quoted as
// identifiers when they reach SQL, never pasted.
type Source struct {
	// Table is the source table or view.
	Table source.Table `json:"table"`
	// Time is the column (timestamp, timestamptz or date) the window and
	// the watermark are taken on.
	Time string `json:"time"`
	// Where is an optional SQL predicate restricting the rows, e.g.
	// site = 'S07'. It is trusted text from the config's author: it runs
	// as written, inside a READ ONLY transaction with a statement timeout.
	Where string `json:"where,omitempty"`
	// Window is the rolling span of time fitted each run: the rows whose
	// time is within Window of the newest. Required, above 0. Written as a
	// Go duration (720h) or in days or weeks (30d, 4w; a day is 24 hours).
	Window time.Duration `json:"window"`
	// Overlap is how far before the watermark each run re-reads rows, so
	// that rows committed late are still picked up (key overlap; default
	// 1h; 0 or more and less than Window).
	Overlap time.Duration `json:"overlap"`
}

// Watch holds the tolerances for comparing a model's fits.
type Watch struct {
	// Against is AgainstBaseline (default) or AgainstPrevious.
	Against string `json:"against"`
	// PracticalShift is the smallest curve shift worth an alert, in
	// link-scale units (default 0.5); above 0.
	PracticalShift float64 `json:"practical_shift"`
	// Level is the simultaneous band level for calling a shift real
	// (default 0.99); between 0 and 1.
	Level float64 `json:"level"`
	// DevianceIncrease is the relative predictive-deviance increase that
	// alerts, as a fraction (default 0.15, i.e. 15%); above 0.
	DevianceIncrease float64 `json:"deviance_increase"`
	// ConfirmRuns is how many consecutive breaching runs it takes before
	// an alert fires (default 2); at least 1.
	ConfirmRuns int `json:"confirm_runs"`
	// FailingRuns is how many refits in a row must fail before a
	// refit-failing alert fires (default 3); at least 1.
	FailingRuns int `json:"failing_runs"`
}

// Tolerance returns the watch section as fit.Compare's tolerance, the
// other fields at their defaults.
func (w Watch) Tolerance() fit.Tolerance {
	t := fit.DefaultTolerance()
	t.PracticalShift = w.PracticalShift
	t.Level = w.Level
	t.DevianceIncrease = w.DevianceIncrease
	return t
}

// Model returns the model named name.
func (c *Config) Model(name string) (*Model, bool) {
	i := slices.IndexFunc(c.Models, func(m Model) bool { return m.Name == name })
	if i < 0 {
		return nil, false
	}
	return &c.Models[i], true
}

// ParseOptions says how to read a config.
type ParseOptions struct {
	// Dir is the folder relative spec_file paths are read from; "" is the
	// current folder. Load sets it to the config file's folder.
	Dir string
	// Getenv reads environment variables for ${VAR}; nil means os.Getenv.
	Getenv func(string) string
}

// Parse reads a config written in YAML and checks it: every key, value and
// cron expression, each model's spec (inline, or read from spec_file), and
// that model names are distinct. ${VAR} in a value is replaced by the
// environment variable VAR (see the expansion rules below); a variable that
// is not set is a problem naming it and its line.
//
// It reports every problem at once, as an *Error whose problems are in
// line order, each naming the line and the key ("models[1].schedule").
// With problems it also returns the config as far as it could be read
// (nil when the file is not a YAML mapping), so that a checker can go on to
// check what is there; a daemon must never run such a config.
//
// Expansion: ${NAME} (letters, digits and underscores) is replaced in every
// value, after the YAML is read, so that a value's characters cannot change
// the file's structure; $${ writes a literal ${ and any other $ is kept.
func Parse(r io.Reader, opts ParseOptions) (*Config, error) {
	data, err := io.ReadAll(io.LimitReader(r, maxConfigBytes+1))
	if err != nil {
		return nil, fmt.Errorf("cannot read the config: %w", err)
	}
	if len(data) > maxConfigBytes {
		return nil, &Error{Problems: []Problem{{Message: fmt.Sprintf("the config is larger than %d MiB: is it the right file?", maxConfigBytes>>20)}}}
	}
	if opts.Getenv == nil {
		opts.Getenv = os.Getenv
	}
	p := &parser{opts: opts, failed: map[*yaml.Node]bool{}}
	var c *Config
	if root := p.document(data); root != nil {
		p.expand(root, "")
		c = p.config(root)
	}
	if len(p.problems) > 0 {
		slices.SortStableFunc(p.problems, func(a, b Problem) int { return a.Line - b.Line })
		return c, &Error{Problems: p.problems}
	}
	return c, nil
}

// Load reads and checks the config file at path (see Parse); spec_file
// paths are read from its folder and ${VAR} from the environment. Its
// *Error names the file.
func Load(path string) (*Config, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("cannot read the config: %w", err)
	}
	defer f.Close()
	c, err := Parse(f, ParseOptions{Dir: filepath.Dir(path)})
	if e, ok := err.(*Error); ok {
		e.File = path
	}
	return c, err
}
