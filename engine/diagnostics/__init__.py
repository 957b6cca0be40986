"""What a run says about itself: stiffness estimates and the report vocabulary shared by
the API, the dashboard and the benchmarks."""
