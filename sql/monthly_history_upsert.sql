-- One history row per (site, month): a re-run of the month replaces its row.
INSERT OR REPLACE INTO history
VALUES ($site, $month, $measured_kwh, $expected_kwh, $epi, $epi_ci_low, $epi_ci_high, $pr,
        $pr_temp_corrected, $availability, $coverage, $top_events, $status, $exit_code, $run_id);
