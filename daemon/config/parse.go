package config

import (
	"fmt"
	"net"
	"net/url"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/migrations"
)

// topKeys are the keys of the config's top level.
var topKeys = []string{"database", "schema", "listen", "public_url", "timezone", "api", "alerting", "models"}

// config reads the top-level mapping.
func (p *parser) config(root *yaml.Node) *Config {
	entries, ok := p.mapping(root, root.Line, "", "the config", topKeys...)
	if !ok {
		return nil
	}
	c := &Config{Schema: DefaultSchema, Listen: DefaultListen, Timezone: DefaultTimezone, Location: time.UTC, Lines: map[string]int{},
		Alerting: Alerting{ResendEvery: DefaultResendEvery}}
	byKey := map[string]entry{}
	for _, e := range entries {
		byKey[e.key] = e
		c.Lines[e.key] = e.line
	}
	// The time zone first: the schedules are read in it.
	if e, ok := byKey["timezone"]; ok {
		p.timezone(c, e)
	}
	for _, e := range entries {
		switch e.key {
		case "database":
			if v, ok := p.text(e, e.key, "the PostgreSQL connection string, e.g. database: ${DATABASE_URL}"); ok {
				if msg := checkDatabase(v); msg != "" {
					p.add(e.line, e.key, "%s", msg)
				} else {
					c.Database = NewSecret(v)
				}
			}
		case "schema":
			if v, ok := p.text(e, e.key, "the schema for curvewatch's own tables, e.g. curvewatch"); ok {
				if err := migrations.CheckSchema(v); err != nil {
					p.add(e.line, e.key, "%v", err)
				} else if len(v) > MaxSchemaLength {
					p.add(e.line, e.key, "schema name %q is longer than %d characters: the job queue keeps its tables in the same schema and allows no more; choose a shorter one", clip(v), MaxSchemaLength)
				} else {
					c.Schema = v
				}
			}
		case "listen":
			if v, ok := p.text(e, e.key, "host:port for the HTTP server, e.g. 127.0.0.1:9464"); ok {
				if msg := checkListen(v); msg != "" {
					p.add(e.line, e.key, "%s", msg)
				} else {
					c.Listen = v
				}
			}
		case "public_url":
			if v, ok := p.text(e, e.key, "the dashboard's address as people reach it, e.g. https://curvewatch.example.org"); ok && p.url(v, e.line, e.key, "public_url", "https://curvewatch.example.org") {
				c.PublicURL = strings.TrimRight(v, "/")
			}
		case "api":
			c.API = p.api(e)
		case "alerting":
			c.Alerting = p.alerting(e)
		case "models":
			c.Models = p.models(e, c.Location)
		}
	}
	if c.PublicURL == "" {
		c.PublicURL = "http://" + c.Listen
	}
	if _, ok := byKey["database"]; !ok {
		p.add(root.Line, "", "missing key \"database\": give the PostgreSQL connection string, e.g. database: ${DATABASE_URL}")
	}
	if _, ok := byKey["models"]; !ok {
		p.add(root.Line, "", "missing key \"models\": list at least one model to refit")
	}
	return c
}

// checkDatabase checks the form of a connection string without ever
// quoting it: it may hold a password.
func checkDatabase(v string) string {
	const hidden = " (the value is not shown: it may hold a password)"
	if strings.HasPrefix(v, "postgres://") || strings.HasPrefix(v, "postgresql://") {
		if _, err := url.Parse(v); err != nil {
			return "database is not a valid postgres:// URL: check its punctuation; a password with @, : or / in it must be percent-encoded" + hidden
		}
		return ""
	}
	if strings.Contains(v, "://") {
		return "database must be a postgres:// or postgresql:// URL, or key=value settings such as host=… dbname=…" + hidden
	}
	if !strings.Contains(v, "=") {
		return "database must be a postgres:// URL or key=value settings such as host=db dbname=river" + hidden
	}
	return ""
}

// checkListen checks a host:port listen address.
func checkListen(v string) string {
	host, port, err := net.SplitHostPort(v)
	if err != nil {
		return fmt.Sprintf("listen %q is not host:port: write e.g. 127.0.0.1:9464, or :9464 for every interface", clip(v))
	}
	if n, err := strconv.Atoi(port); err != nil || n < 0 || n > 65535 {
		return fmt.Sprintf("listen %q has port %q: a port is a number from 0 to 65535", clip(v), clip(port))
	}
	if strings.ContainsAny(host, " /") {
		return fmt.Sprintf("listen %q has host %q: give an IP address or host name", clip(v), clip(host))
	}
	return ""
}

// timezone reads the time zone schedules are read in.
func (p *parser) timezone(c *Config, e entry) {
	v, ok := p.text(e, e.key, "an IANA time zone name such as UTC or Europe/London")
	if !ok {
		return
	}
	if v == "Local" {
		p.add(e.line, e.key, "timezone Local depends on the machine the daemon runs on (replicas could disagree on slots): name the zone, e.g. Europe/London, or UTC")
		return
	}
	loc, err := time.LoadLocation(v)
	if err != nil {
		p.add(e.line, e.key, "timezone %q is not a known IANA time zone name: write one such as UTC, Europe/London or America/Chicago (names are case-sensitive)", clip(v))
		return
	}
	c.Timezone, c.Location = v, loc
}

// api reads the api section.
func (p *parser) api(e entry) API {
	var a API
	entries, ok := p.mapping(e.val, e.line, "api", "api", "token")
	if !ok {
		return a
	}
	for _, f := range entries {
		if v, ok := p.text(f, join("api", f.key), `a long random token, e.g. token: "${CURVEWATCH_API_TOKEN}"`); ok {
			if len(v) < 16 {
				p.add(f.line, join("api", f.key), "api.token is shorter than 16 characters (the value is not shown): use a long random token, e.g. from openssl rand -hex 24")
			} else {
				a.Token = NewSecret(v)
			}
		}
	}
	return a
}

// alerting reads the alerting section.
func (p *parser) alerting(e entry) Alerting {
	const path = "alerting"
	a := Alerting{ResendEvery: DefaultResendEvery}
	entries, ok := p.mapping(e.val, e.line, path, "alerting", "alertmanager", "webhooks", "fdr", "resend_every")
	if !ok {
		return a
	}
	for _, f := range entries {
		fpath := join(path, f.key)
		switch f.key {
		case "fdr":
			if v, ok := p.number(f, fpath); ok && (v <= 0 || v >= 1) {
				p.add(f.line, fpath, "fdr %s must be between 0 and 1: it is the false discovery rate allowed across the models of one schedule, e.g. 0.1; leave fdr out to judge each model alone", clip(f.val.Value))
			} else if ok {
				a.FDR = v
			}
		case "resend_every":
			if d, ok := p.duration(f, fpath); ok && d < time.Second {
				p.add(f.line, fpath, "resend_every %s must be at least 1s: it is how often firing alerts are re-sent to Alertmanager, e.g. 1m", clip(f.val.Value))
			} else if ok {
				a.ResendEvery = d
			}
		case "alertmanager":
			items, _ := p.list(f, fpath, "Alertmanager URLs")
			for i, it := range items {
				ipath := fmt.Sprintf("%s[%d]", fpath, i)
				if u, ok := p.text(entry{key: "an Alertmanager URL", line: it.Line, val: it}, ipath, "an http:// or https:// URL"); ok {
					if p.url(u, it.Line, ipath, "Alertmanager URL", "http://127.0.0.1:9093") {
						a.Alertmanager = append(a.Alertmanager, u)
					}
				}
			}
		case "webhooks":
			items, _ := p.list(f, fpath, "webhooks ({url, secret})")
			for i, it := range items {
				if w, ok := p.webhook(it, fmt.Sprintf("%s[%d]", fpath, i)); ok {
					a.Webhooks = append(a.Webhooks, w)
				}
			}
		}
	}
	return a
}

// webhook reads one webhook: url (required) and secret.
func (p *parser) webhook(n *yaml.Node, path string) (Webhook, bool) {
	var w Webhook
	entries, ok := p.mapping(n, n.Line, path, "a webhook", "url", "secret")
	if !ok {
		return w, false
	}
	ok = false
	for _, f := range entries {
		switch f.key {
		case "url":
			if u, good := p.text(f, join(path, f.key), "an http:// or https:// URL"); good && p.url(u, f.line, join(path, f.key), "webhook URL", "https://alerts.example.org/hook") {
				w.URL, ok = u, true
			}
		case "secret":
			if v, good := p.text(f, join(path, f.key), `the signing secret, e.g. secret: "${HOOK_SECRET}"`); good {
				w.Secret = NewSecret(v)
			}
		}
	}
	if _, has := keyLine(entries, "url"); !has {
		p.add(n.Line, path, "missing key \"url\": a webhook needs the URL alerts are POSTed to")
	}
	return w, ok
}

// url checks an http or https URL.
func (p *parser) url(v string, line int, path, what, example string) bool {
	u, err := url.Parse(v)
	switch {
	case err != nil:
		p.add(line, path, "%s %q is not a valid URL: write e.g. %s", what, clip(v), example)
	case u.Scheme != "http" && u.Scheme != "https":
		p.add(line, path, "%s %q must start with http:// or https://, e.g. %s", what, clip(v), example)
	case u.Host == "":
		p.add(line, path, "%s %q has no host: write e.g. %s", what, clip(v), example)
	default:
		return true
	}
	return false
}

// keyLine returns the line of key among entries.
func keyLine(entries []entry, key string) (int, bool) {
	for _, e := range entries {
		if e.key == key {
			return e.line, true
		}
	}
	return 0, false
}
