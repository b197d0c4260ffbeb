"""Running a study where the GPUs are: several local work loops, SLURM job arrays, and the
check that keeps a SQLite ledger off network filesystems when many processes write it."""
