// Package examples holds example configurations to run curvewatch with
// Prometheus and Grafana, and the tests that check them against the real
// tools and the real schema:
//
//   - prometheus/prometheus.yml: a scrape config for the daemon, with
//     alerting to a local Alertmanager;
//   - prometheus/curvewatch-rules.yml: alerting rules on curvewatch's
//     metrics, with unit tests in curvewatch-rules.test.yml
//     (promtool test rules);
//   - grafana/curvewatch-dashboard.json: a dashboard over the metrics
//     (Prometheus) and the fit history (PostgreSQL, schema curvewatch).
//
// The tests need promtool (Debian package prometheus) and a PostgreSQL
// server (see internal/pgtest).
package examples
