"""Runtime risk: sampled run times, replays of a plan under them, and plans that hold up."""
