-- Alert delivery: what each alert said when it changed, the outbox of
-- deliveries to receivers (so that a restart loses none), the figures the
-- fleet page and the metrics read without opening report documents, and the
-- per-slot tests of the optional false-discovery-rate control.

ALTER TABLE alert_states
    ADD COLUMN firing_since timestamptz,
    ADD COLUMN summary      text NOT NULL DEFAULT '',
    ADD COLUMN updated_at   timestamptz NOT NULL DEFAULT now();
COMMENT ON COLUMN alert_states.firing_since IS 'When the alert last started firing (Alertmanager''s startsAt); kept after it resolves.';
COMMENT ON COLUMN alert_states.summary IS 'One line for people: what the latest evaluation found.';
COMMENT ON COLUMN alert_states.updated_at IS 'When the alert was last evaluated.';

ALTER TABLE alert_events
    ADD COLUMN summary text NOT NULL DEFAULT '',
    ADD COLUMN fit_id  bigint REFERENCES fits (id) ON DELETE SET NULL;
COMMENT ON COLUMN alert_events.summary IS 'The one-line summary at the transition.';
COMMENT ON COLUMN alert_events.fit_id IS 'The refit whose evaluation made the transition, when there is one.';

ALTER TABLE comparisons
    ADD COLUMN degradation_ratio double precision,
    ADD COLUMN p_value           double precision;
COMMENT ON COLUMN comparisons.degradation_ratio IS 'Reference deviance on the new rows over the new fit''s optimism-corrected deviance (report.degradation.ratio); NULL when not computed.';
COMMENT ON COLUMN comparisons.p_value IS 'The smallest multiplicity-adjusted p-value of the comparison''s terms and level: the model''s p-value in the false-discovery-rate control.';

CREATE TABLE alert_deliveries (
    id              bigserial PRIMARY KEY,
    receiver        text NOT NULL,
    idempotency_key text NOT NULL,
    model           text NOT NULL REFERENCES models (name) ON UPDATE CASCADE ON DELETE CASCADE,
    alert           jsonb NOT NULL,
    state           text NOT NULL DEFAULT 'queued' CHECK (state IN ('queued', 'delivered', 'abandoned')),
    attempts        integer NOT NULL DEFAULT 0 CHECK (attempts >= 0),
    due_at          timestamptz NOT NULL DEFAULT now(),
    last_error      text,
    created_at      timestamptz NOT NULL DEFAULT now(),
    finished_at     timestamptz,
    UNIQUE (receiver, idempotency_key)
);
CREATE INDEX alert_deliveries_due_idx ON alert_deliveries (due_at) WHERE state = 'queued';
COMMENT ON TABLE alert_deliveries IS 'The outbox: one row per alert state change per receiver, queued in the refit''s transaction and sent by the dispatcher.';
COMMENT ON COLUMN alert_deliveries.receiver IS 'The receiver''s name (alertmanager:URL or webhook:URL); never a secret.';
COMMENT ON COLUMN alert_deliveries.idempotency_key IS 'The same for every attempt at one state change; receivers may use it to drop repeats.';
COMMENT ON COLUMN alert_deliveries.alert IS 'What the receiver is told (package alerts, type Alert), as JSON.';
COMMENT ON COLUMN alert_deliveries.state IS 'queued: to be sent at due_at; delivered; abandoned: refused by the receiver or out of attempts.';
COMMENT ON COLUMN alert_deliveries.due_at IS 'When the next attempt is due; a claim moves it forward by the claim''s lease.';

CREATE TABLE slot_tests (
    schedule text NOT NULL,
    slot     timestamptz NOT NULL,
    model    text NOT NULL REFERENCES models (name) ON UPDATE CASCADE ON DELETE CASCADE,
    fit_id   bigint REFERENCES fits (id) ON DELETE SET NULL,
    p_value  double precision,
    PRIMARY KEY (schedule, slot, model)
);
COMMENT ON TABLE slot_tests IS 'With the false-discovery-rate option: each model''s p-value for one slot of its schedule, until every model of the schedule has reported.';
COMMENT ON COLUMN slot_tests.schedule IS 'The schedule as written in the config; models with the same schedule form one family.';
COMMENT ON COLUMN slot_tests.p_value IS 'The comparison''s smallest adjusted p-value; NULL when the refit failed or was not compared.';
