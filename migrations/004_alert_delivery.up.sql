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
-- The event log is paged newest first by id, per model; deleting a fit
-- finds the events that name it through the second index.
CREATE INDEX alert_events_model_id_idx ON alert_events (model, id DESC);
CREATE INDEX alert_events_fit_idx ON alert_events (fit_id) WHERE fit_id IS NOT NULL;

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
-- What a claim scans: the queued rows in due order.
CREATE INDEX alert_deliveries_due_idx ON alert_deliveries (due_at, id) WHERE state = 'queued';
-- The API's list per model, newest first.
CREATE INDEX alert_deliveries_model_id_idx ON alert_deliveries (model, id DESC);
-- Pruning finished rows by age.
CREATE INDEX alert_deliveries_finished_idx ON alert_deliveries (finished_at) WHERE state <> 'queued';
COMMENT ON TABLE alert_deliveries IS 'The outbox: one row per alert state change per receiver, queued in the refit''s transaction and sent by the dispatcher.';
COMMENT ON COLUMN alert_deliveries.id IS 'Delivery id, increasing in the order deliveries were queued.';
COMMENT ON COLUMN alert_deliveries.receiver IS 'The receiver''s name (alertmanager:URL or webhook:URL); never a secret.';
COMMENT ON COLUMN alert_deliveries.idempotency_key IS 'The same for every attempt at one state change; receivers may use it to drop repeats.';
COMMENT ON COLUMN alert_deliveries.model IS 'The model the alert is about (models.name).';
COMMENT ON COLUMN alert_deliveries.alert IS 'What the receiver is told (package alerts, type Alert), as JSON.';
COMMENT ON COLUMN alert_deliveries.state IS 'queued: to be sent at due_at; delivered; abandoned: refused by the receiver or out of attempts.';
COMMENT ON COLUMN alert_deliveries.attempts IS 'Attempts made so far, the successful one included; a claim whose dispatcher died before reporting does not count.';
COMMENT ON COLUMN alert_deliveries.due_at IS 'When the next attempt is due; a claim moves it forward by the claim''s lease.';
COMMENT ON COLUMN alert_deliveries.last_error IS 'Why the latest failed attempt failed; NULL until one has.';
COMMENT ON COLUMN alert_deliveries.created_at IS 'When the delivery was queued (the refit''s transaction time).';
COMMENT ON COLUMN alert_deliveries.finished_at IS 'When the delivery was delivered or abandoned; NULL while queued.';

CREATE TABLE slot_tests (
    schedule text NOT NULL,
    slot     timestamptz NOT NULL,
    model    text NOT NULL REFERENCES models (name) ON UPDATE CASCADE ON DELETE CASCADE,
    fit_id   bigint REFERENCES fits (id) ON DELETE SET NULL,
    p_value  double precision,
    PRIMARY KEY (schedule, slot, model)
);
-- Pruning by age.
CREATE INDEX slot_tests_slot_idx ON slot_tests (slot);
CREATE INDEX slot_tests_fit_idx ON slot_tests (fit_id) WHERE fit_id IS NOT NULL;
COMMENT ON TABLE slot_tests IS 'With the false-discovery-rate option: each model''s p-value for one slot of its schedule, until every model of the schedule has reported.';
COMMENT ON COLUMN slot_tests.schedule IS 'The schedule as written in the config; models with the same schedule form one family.';
COMMENT ON COLUMN slot_tests.slot IS 'The scheduled slot the refits ran for.';
COMMENT ON COLUMN slot_tests.model IS 'The model (models.name), one of the schedule''s family.';
COMMENT ON COLUMN slot_tests.fit_id IS 'The refit that reported (fits.id); NULL once that fit is deleted.';
COMMENT ON COLUMN slot_tests.p_value IS 'The comparison''s smallest adjusted p-value; NULL when the refit failed or was not compared.';
