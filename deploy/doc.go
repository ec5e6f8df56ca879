// Package deploy holds the files docker-compose.yml (at the repository
// root) mounts into its containers, and the tests that check them without
// Docker:
//
//   - curvewatch/curvewatch.yaml: the daemon's config (river sondes), its
//     database URL, webhook secret and API token from the environment;
//   - postgres/init/: creates the roles (curvewatch, grafana_reader) and the
//     source table river.sonde_readings on a new data volume;
//   - prometheus/prometheus.yml: scrapes the daemon and loads the shipped
//     rules (examples/prometheus/curvewatch-rules.yml);
//   - alertmanager/alertmanager.yml: routes the daemon's and the rules'
//     alerts;
//   - grafana/provisioning/: the Prometheus and PostgreSQL data sources, and
//     the shipped dashboard (examples/grafana/curvewatch-dashboard.json).
//
// The tests parse docker-compose.yml, check that every file it mounts
// exists and that paths inside the containers line up, run promtool and
// amtool on the Prometheus and Alertmanager configs (Debian packages
// prometheus and prometheus-alertmanager), and parse the daemon config with
// curvewatch's own parser.
package deploy
