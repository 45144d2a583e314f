"""Planning methods: greedy (list scheduling), ga (genetic algorithm), exact (CP-SAT)."""
