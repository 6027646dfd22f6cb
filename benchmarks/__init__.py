"""setkit benchmarks: `python -m benchmarks.run --quick | --full`."""
