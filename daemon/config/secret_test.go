package config

import (
	"bytes"
	"encoding/json"
	"fmt"
	"log/slog"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
)

// A config's secrets never show, however the config is formatted.
func TestSecretsNeverShow(t *testing.T) {
	const dbSecret, hookSecret = "pw-7Qx2-river", "hook-9Zk4"
	env := map[string]string{
		"DATABASE_URL": "postgres://curvewatch:" + dbSecret + "@db.example:5432/river",
		"HOOK_SECRET":  hookSecret,
	}
	in := `database: ${DATABASE_URL}
alerting:
  webhooks: [{url: "http://127.0.0.1:8080/hook", secret: "${HOOK_SECRET}"}]
models:
  - name: s1
    schedule: "@hourly"
    source: {table: r, time: t, window: 1d}
    spec: {response: y, terms: [{curve: x}]}
`
	c, err := Parse(strings.NewReader(in), ParseOptions{Getenv: getenv(env)})
	if err != nil {
		t.Fatal(err)
	}
	if c.Database.Reveal() != env["DATABASE_URL"] || c.Alerting.Webhooks[0].Secret.Reveal() != hookSecret {
		t.Fatalf("Reveal does not give the values back")
	}
	var outputs []string
	for _, verb := range []string{"%v", "%+v", "%#v", "%s", "%q", "%x", "%X", "%d", "%10.3v"} {
		outputs = append(outputs,
			fmt.Sprintf(verb, c), fmt.Sprintf(verb, *c), fmt.Sprintf(verb, c.Database),
			fmt.Sprintf(verb, c.Alerting), fmt.Sprintf(verb, c.Alerting.Webhooks))
	}
	outputs = append(outputs, fmt.Sprint(c), fmt.Sprintln(c.Database), c.Database.String(), c.Database.GoString())
	for _, v := range []any{c, c.Database, c.Alerting} {
		b, err := json.Marshal(v)
		if err != nil {
			t.Fatalf("json.Marshal(%T): %v", v, err)
		}
		outputs = append(outputs, string(b))
		y, err := yaml.Marshal(v)
		if err != nil {
			t.Fatalf("yaml.Marshal(%T): %v", v, err)
		}
		outputs = append(outputs, string(y))
	}
	var logs bytes.Buffer
	for _, h := range []slog.Handler{slog.NewTextHandler(&logs, nil), slog.NewJSONHandler(&logs, nil)} {
		log := slog.New(h)
		log.Info("config", "config", c, "database", c.Database, "webhooks", c.Alerting.Webhooks)
		log.Info("config", slog.Any("secret", c.Alerting.Webhooks[0].Secret), slog.Group("g", "db", c.Database))
	}
	outputs = append(outputs, logs.String())
	for i, out := range outputs {
		for _, secret := range []string{dbSecret, hookSecret, fmt.Sprintf("%x", dbSecret), fmt.Sprintf("%x", hookSecret)} {
			if strings.Contains(out, secret) {
				t.Errorf("output %d shows a secret:\n%s", i, out)
			}
		}
	}
	if !strings.Contains(logs.String(), redacted) || !strings.Contains(fmt.Sprintf("%+v", c), "Database:"+redacted) {
		t.Errorf("the redacted marker is missing; logs:\n%s", logs.String())
	}
}

func TestEmptySecret(t *testing.T) {
	var s Secret
	if !s.IsZero() || s.String() != "" || fmt.Sprintf("%v|%#v", s, s) != "|config.Secret{}" {
		t.Errorf("empty secret: IsZero %v, String %q, %%v|%%#v %q", s.IsZero(), s.String(), fmt.Sprintf("%v|%#v", s, s))
	}
	b, _ := json.Marshal(s)
	if string(b) != `""` {
		t.Errorf("empty secret JSON = %s", b)
	}
}
