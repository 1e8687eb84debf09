"""What every process tells its operators: JSON log lines and Prometheus metrics."""
