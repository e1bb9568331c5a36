"""Scripts that tests run in their own processes."""
