-- The results table of `upshot run --into upshot_results` (DuckDB types).
-- Generated from upshot-sql's RESULT_COLUMNS; a test keeps it in step.
CREATE TABLE IF NOT EXISTS upshot_results (
  run_id VARCHAR, -- identifies one run: the run key, or one made from the time and plan hash
  run_key VARCHAR, -- the --run-key given (NULL without one); rerunning with it replaces the run's rows
  run_at TIMESTAMP, -- when the run wrote its rows (the transaction's time)
  tool_version VARCHAR, -- upshot's version
  study VARCHAR, -- study name
  question VARCHAR, -- question name
  plan_hash VARCHAR, -- hash of the plan's SQL: equal hashes ran the same passes
  treatment VARCHAR, -- treatment column
  outcome VARCHAR, -- outcome column
  segment VARCHAR, -- `all`, or `column=value, ...`
  estimand VARCHAR, -- ATE, ATT or ATC
  method VARCHAR, -- method key
  estimate DOUBLE, -- point estimate
  std_error DOUBLE, -- standard error
  ci_low DOUBLE, -- lower end of the 95% interval
  ci_high DOUBLE, -- upper end of the 95% interval
  n_treated DOUBLE, -- treated rows used (NULL for a continuous treatment)
  n_control DOUBLE, -- control rows used (NULL for a continuous treatment)
  n_used DOUBLE, -- rows used
  rows_read DOUBLE, -- rows after the filter
  rows_excluded_null DOUBLE, -- rows excluded for NULL in a used column
  rows_excluded_other DOUBLE, -- rows excluded otherwise (strata lacking an arm)
  adjustment_set VARCHAR, -- adjustment columns, comma-separated
  source VARCHAR -- the rows read: table, file or `query`
);
