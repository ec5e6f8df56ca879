#!/bin/sh
# Runs once, when the postgres container starts on an empty data volume
# (the image runs /docker-entrypoint-initdb.d/*). It creates
#   - the source table river.sonde_readings, where the sondes' readings go;
#   - the role curvewatch, the daemon's: it owns the schema curvewatch (its
#     history and job queue) and reads the schema river;
#   - the role grafana_reader: Grafana's read-only view of the history.
# The passwords come from the container's environment (docker-compose.yml);
# none is written here.
set -eu

psql -v ON_ERROR_STOP=1 --username "$POSTGRES_USER" --dbname "$POSTGRES_DB" \
	-v db="$POSTGRES_DB" \
	-v curvewatch_password="$CURVEWATCH_DB_PASSWORD" \
	-v grafana_password="$GRAFANA_DB_PASSWORD" <<'SQL'
CREATE ROLE curvewatch LOGIN PASSWORD :'curvewatch_password';
CREATE ROLE grafana_reader LOGIN PASSWORD :'grafana_password';

-- The daemon's migrations run CREATE SCHEMA IF NOT EXISTS, which needs
-- the CREATE privilege on the database even when the schema exists.
GRANT CREATE ON DATABASE :"db" TO curvewatch;
CREATE SCHEMA curvewatch AUTHORIZATION curvewatch;

CREATE SCHEMA river;
CREATE TABLE river.sonde_readings (
    observed_at      timestamptz NOT NULL,
    site             text NOT NULL,
    water_temp       double precision,   -- °C
    flow             double precision,   -- m³/s
    hour             double precision,   -- hour of day at the site, 0–24
    dissolved_oxygen double precision    -- mg/L
);
CREATE INDEX ON river.sonde_readings (observed_at);
GRANT USAGE ON SCHEMA river TO curvewatch;
GRANT SELECT ON ALL TABLES IN SCHEMA river TO curvewatch;
ALTER DEFAULT PRIVILEGES IN SCHEMA river GRANT SELECT ON TABLES TO curvewatch;

GRANT USAGE ON SCHEMA curvewatch TO grafana_reader;
ALTER DEFAULT PRIVILEGES FOR ROLE curvewatch IN SCHEMA curvewatch GRANT SELECT ON TABLES TO grafana_reader;
SQL
