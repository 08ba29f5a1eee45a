# The demo campaign's simulated data.

# The demo's data are simulated when missing, and only then: once they exist they are plain
# inputs, so nothing (not even an edit of this file) regenerates them behind the user's back.
if PLAN.simulation_folder is not None and not all(Path(f).exists()
                                                  for f in PLAN.simulated_files()):

    rule simulate_demo:
        input:
            scenario=str(PLAN.campaign.scenario),
        output:
            [f.replace("{", "{{").replace("}", "}}") for f in PLAN.simulated_files()],
        params:
            folder=lambda w, output: str(Path(output[0]).parent),  # layout.csv is first
        log:
            f"{OUTP}/logs/simulate_demo.log",
        benchmark:
            f"{OUTP}/benchmarks/simulate_demo.tsv"
        # Nothing else can start before the data exist: every core simulates, a pass each.
        # Measured peak: 3.4-4.8 GB for two workers (the pass over raised microphones the most).
        threads: workflow.cores
        resources:
            mem_mb=lambda wildcards, threads: 3000 * threads,
        conda:
            CONDA_ENV,
        shell:
            '"$FLYOVER_PYTHON" -m flyover simulate {input.scenario:q} --out {params.folder:q} '
            "--workers {threads} > {log:q} 2>&1"
