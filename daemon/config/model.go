package config

import (
	"fmt"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/jobs/source"
)

// modelKeys are the keys of one model.
var modelKeys = []string{"name", "schedule", "source", "spec", "spec_file", "watch", "max_age"}

// models reads the models list and checks that the names are distinct.
func (p *parser) models(e entry, loc *time.Location) []Model {
	items, ok := p.list(e, e.key, "models")
	if !ok {
		return nil
	}
	if len(items) == 0 {
		p.add(e.line, e.key, "models is empty: list at least one model to refit")
		return nil
	}
	var out []Model
	first := map[string]int{} // model name → index of its first model
	for i, it := range items {
		m := p.model(it, i, loc)
		if m.Name != "" {
			if j, dup := first[m.Name]; dup {
				p.add(m.Lines["name"], fmt.Sprintf("models[%d].name", i), "model name %q is already used by models[%d] (line %d): each model needs its own name", m.Name, j, out[j].Lines["name"])
			} else {
				first[m.Name] = i
			}
		}
		out = append(out, m)
	}
	return out
}

// model reads one model.
func (p *parser) model(n *yaml.Node, i int, loc *time.Location) Model {
	path := fmt.Sprintf("models[%d]", i)
	m := Model{Line: n.Line, Lines: map[string]int{}}
	entries, ok := p.mapping(n, n.Line, path, "a model", modelKeys...)
	if !ok {
		return m
	}
	var specEntry, specFile, watch *entry
	for _, e := range entries {
		m.Lines[e.key] = e.line
		kpath := join(path, e.key)
		switch e.key {
		case "name":
			if v, ok := p.text(e, kpath, "a name such as sonde-07-oxygen"); ok {
				if msg := checkModelName(v); msg != "" {
					p.add(e.line, kpath, "%s", msg)
				} else {
					m.Name = v
				}
			}
		case "schedule":
			if v, ok := p.text(e, kpath, `a 5-field cron expression such as "0 3 * * *", or @every 10m`); ok {
				m.Schedule = v
				s, err := ParseSchedule(v, loc)
				if err != nil {
					p.add(e.line, kpath, "%v", err)
				}
				m.Cron = s
			}
		case "source":
			m.Source = p.source(e, kpath, m.Lines)
		case "spec":
			specEntry = &e
		case "spec_file":
			specFile = &e
		case "watch":
			watch = &e
		case "max_age":
			if d, ok := p.duration(e, kpath); ok {
				if d <= 0 {
					p.add(e.line, kpath, "max_age %s must be above 0: it is how old the newest row may get before a data-stopped alert; leave max_age out for no such alert", clip(e.val.Value))
				} else {
					m.MaxAge = d
				}
			}
		}
	}
	for _, key := range []string{"name", "schedule", "source"} {
		if _, ok := m.Lines[key]; !ok {
			p.add(n.Line, path, "missing key %q: every model needs name, schedule, source and spec (or spec_file)", key)
		}
	}
	switch {
	case specEntry != nil && specFile != nil:
		p.add(specFile.line, join(path, "spec_file"), "give the spec inline (spec, line %d) or in a file (spec_file), not both", specEntry.line)
	case specEntry != nil:
		m.Spec = p.inlineSpec(*specEntry, join(path, "spec"), m.Name)
	case specFile != nil:
		m.SpecFile, m.Spec = p.specFile(*specFile, join(path, "spec_file"), m.Name)
	default:
		p.add(n.Line, path, "missing key \"spec\": give the model spec inline under spec, or its file under spec_file")
	}
	if m.Spec != nil && m.Name != "" {
		m.Spec.Name = m.Name
	}
	m.Watch = p.watch(watch, join(path, "watch"), m.Spec)
	return m
}

// checkModelName checks a model's name. The rule is narrower than what a
// Prometheus label value allows (any UTF-8), so that the name also works
// unquoted on the command line and in a URL path.
func checkModelName(v string) string {
	const rule = "1 to 63 letters (a-z, A-Z), digits, '.', '_' and '-', starting with a letter or digit, e.g. sonde-07-oxygen"
	if len(v) > 63 {
		return fmt.Sprintf("name %q is %d characters long: a model name is %s", clip(v), len(v), rule)
	}
	for i, r := range v {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9':
		case (r == '.' || r == '_' || r == '-') && i > 0:
		default:
			return fmt.Sprintf("name %q holds %q: a model name is %s (it labels metrics and appears in URLs and on the command line)", clip(v), r, rule)
		}
	}
	return ""
}

// sourceKeys are the keys of a model's source.
var sourceKeys = []string{"table", "time", "where", "window", "overlap"}

// source reads a model's source section, recording key lines in lines as
// "source.KEY".
func (p *parser) source(e entry, path string, lines map[string]int) Source {
	s := Source{Overlap: DefaultOverlap}
	entries, ok := p.mapping(e.val, e.line, path, "source", sourceKeys...)
	if !ok {
		return s
	}
	windowOK, overlapLine := false, 0
	for _, f := range entries {
		lines["source."+f.key] = f.line
		fpath := join(path, f.key)
		switch f.key {
		case "table":
			if v, ok := p.text(f, fpath, "the source table, as schema.table or table"); ok {
				t, err := source.ParseTable(v)
				if err != nil {
					p.add(f.line, fpath, "%v", err)
				} else {
					s.Table = t
				}
			}
		case "time":
			if v, ok := p.text(f, fpath, "the column giving each row's time, e.g. observed_at"); ok {
				if err := source.CheckName(v); err != nil {
					p.add(f.line, fpath, "column %q: %v", clip(v), err)
				} else {
					s.Time = v
				}
			}
		case "where":
			if v, ok := p.text(f, fpath, "an SQL condition on the rows, e.g. site = 'S07'"); ok {
				if strings.ContainsRune(v, 0) {
					p.add(f.line, fpath, "where holds a NUL character")
				} else {
					s.Where = strings.TrimSpace(v)
				}
			}
		case "window":
			if d, ok := p.duration(f, fpath); ok {
				if d <= 0 {
					p.add(f.line, fpath, "window %s must be above 0: it is the span of time fitted each run, e.g. 720h or 30d", clip(f.val.Value))
				} else {
					s.Window, windowOK = d, true
				}
			}
		case "overlap":
			if d, ok := p.duration(f, fpath); ok {
				if d < 0 {
					p.add(f.line, fpath, "overlap %s must not be negative: it is how far before the watermark each run re-reads rows (default 1h; 0 for none)", clip(f.val.Value))
				} else {
					s.Overlap, overlapLine = d, f.line
				}
			}
		}
	}
	for _, key := range []string{"table", "time", "window"} {
		if _, ok := lines["source."+key]; !ok {
			p.add(e.line, path, "missing key %q: a source needs table, time and window", key)
		}
	}
	switch {
	case !windowOK || s.Overlap < s.Window:
	case overlapLine > 0:
		p.add(overlapLine, join(path, "overlap"), "overlap %s must be shorter than window %s: each run re-reads this much before its watermark", fmtDuration(s.Overlap), fmtDuration(s.Window))
	default:
		p.add(lines["source.window"], join(path, "window"), "window %s is not longer than the default overlap %s (how far before its watermark each run re-reads): lengthen the window, or set a shorter overlap, e.g. overlap: 5m", fmtDuration(s.Window), fmtDuration(DefaultOverlap))
	}
	return s
}

// watchKeys are the keys of a watch section.
var watchKeys = []string{"against", "practical_shift", "level", "deviance_increase", "confirm_runs", "failing_runs"}
