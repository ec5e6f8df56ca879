DROP TABLE alert_events;
DROP TABLE alert_states;
