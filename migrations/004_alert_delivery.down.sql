DROP TABLE slot_tests;
DROP TABLE alert_deliveries;
ALTER TABLE comparisons DROP COLUMN degradation_ratio, DROP COLUMN p_value;
DROP INDEX alert_events_model_id_idx;
ALTER TABLE alert_events DROP COLUMN summary, DROP COLUMN fit_id;
ALTER TABLE alert_states DROP COLUMN firing_since, DROP COLUMN summary, DROP COLUMN updated_at;
