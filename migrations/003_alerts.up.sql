-- Alert state per model, term and kind of finding, and the log of its
-- transitions (used by the alerting issue).

CREATE TABLE alert_states (
    model       text NOT NULL REFERENCES models (name) ON UPDATE CASCADE ON DELETE CASCADE,
    term        text NOT NULL,
    kind        text NOT NULL,
    state       text NOT NULL CHECK (state IN ('pending', 'firing', 'resolved')),
    since       timestamptz NOT NULL,
    consecutive integer NOT NULL DEFAULT 0 CHECK (consecutive >= 0),
    numbers     jsonb,
    PRIMARY KEY (model, term, kind)
);
COMMENT ON TABLE alert_states IS 'The current state of each alert: one row per model, term and kind of finding.';
COMMENT ON COLUMN alert_states.model IS 'The model (models.name).';
COMMENT ON COLUMN alert_states.term IS 'The term the alert is about; empty for model-wide findings (level, predictive deviance).';
COMMENT ON COLUMN alert_states.kind IS 'What kind of finding (for example shift, level, degradation, refit_failed).';
COMMENT ON COLUMN alert_states.state IS 'pending: breaching, not yet for confirm_runs runs; firing: sent to the receivers; resolved: back within tolerance.';
COMMENT ON COLUMN alert_states.since IS 'When the alert entered its current state.';
COMMENT ON COLUMN alert_states.consecutive IS 'Consecutive breaching runs so far (compared with watch.confirm_runs).';
COMMENT ON COLUMN alert_states.numbers IS 'The figures behind the latest evaluation (score, size, fit ids, ...), as JSON.';

CREATE TABLE alert_events (
    id      bigserial PRIMARY KEY,
    model   text NOT NULL REFERENCES models (name) ON UPDATE CASCADE ON DELETE CASCADE,
    term    text NOT NULL,
    kind    text NOT NULL,
    state   text NOT NULL CHECK (state IN ('pending', 'firing', 'resolved')),
    at      timestamptz NOT NULL DEFAULT now(),
    numbers jsonb
);
CREATE INDEX alert_events_model_at_idx ON alert_events (model, at DESC);
COMMENT ON TABLE alert_events IS 'Every transition of an alert''s state, oldest first by id.';
COMMENT ON COLUMN alert_events.id IS 'Event id, increasing in the order events were recorded.';
COMMENT ON COLUMN alert_events.model IS 'The model (models.name).';
COMMENT ON COLUMN alert_events.term IS 'The term, as in alert_states.term.';
COMMENT ON COLUMN alert_events.kind IS 'The kind of finding, as in alert_states.kind.';
COMMENT ON COLUMN alert_events.state IS 'The state entered.';
COMMENT ON COLUMN alert_events.at IS 'When the state was entered.';
COMMENT ON COLUMN alert_events.numbers IS 'The figures at the transition, as JSON.';
