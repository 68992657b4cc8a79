DROP TABLE drift_events;
DROP TABLE drift_states;
DROP TABLE baseline_leads;
DROP TABLE baselines;
