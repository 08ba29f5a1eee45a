"""What the Snakemake workflow needs: plans, re-run fingerprints, dry-run reading, rules."""
