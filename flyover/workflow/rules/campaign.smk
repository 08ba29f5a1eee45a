# Campaign steps: the summary over passes and the report (outputs flagged update(), as in
# pass.smk).


rule signoff:
    input:
        PLAN.pass_step_results("align", "image", "metrics", "trackcheck"),
    output:
        **outputs("signoff"),
    params:
        fingerprint=PLAN.campaign_fingerprint("signoff"),
    log:
        f"{OUTP}/logs/signoff.log",
    benchmark:
        f"{OUTP}/benchmarks/signoff.tsv"
    resources:
        mem_mb=PLAN.memory_mb(None, "signoff"),
        runtime=PLAN.runtime_min(None, "signoff"),
    conda:
        CONDA_ENV,
    shell:
        '"$FLYOVER_PYTHON" -m flyover stage-campaign signoff > {log:q} 2>&1'


rule campaign_summary:
    input:
        PLAN.pass_step_results("levels"),
        rules.signoff.output.signoff_csv,     # rejected passes are left out
    output:
        # Each pass's overall levels sum its label's band range: they follow from all the
        # label's passes, so they are written here.
        pass_overall=update(PLAN.pass_results(SUMMARY_PASS_FILES)),
        **outputs("summary"),
    params:
        fingerprint=PLAN.campaign_fingerprint("summary"),
    log:
        f"{OUTP}/logs/campaign_summary.log",
    benchmark:
        f"{OUTP}/benchmarks/campaign_summary.tsv"
    resources:
        mem_mb=PLAN.memory_mb(None, "campaign_summary"),
        runtime=PLAN.runtime_min(None, "campaign_summary"),
    conda:
        CONDA_ENV,
    shell:
        '"$FLYOVER_PYTHON" -m flyover stage-campaign summary > {log:q} 2>&1'


rule hemispheres:
    input:
        PLAN.pass_step_results("levels"),
        rules.signoff.output.signoff_csv,
    output:
        update(PLAN.hemisphere_files()),
    params:
        fingerprint=PLAN.campaign_fingerprint("hemispheres"),
    log:
        f"{OUTP}/logs/hemispheres.log",
    benchmark:
        f"{OUTP}/benchmarks/hemispheres.tsv"
    resources:
        mem_mb=PLAN.memory_mb(None, "hemispheres"),
        runtime=PLAN.runtime_min(None, "hemispheres"),
    conda:
        CONDA_ENV,
    shell:
        '"$FLYOVER_PYTHON" -m flyover stage-campaign hemispheres > {log:q} 2>&1'


# The label comparisons the campaign asks for (analysis.comparisons); none, no rule.
if PLAN.comparison_files():

    rule compare:
        input:
            PLAN.pass_step_results("levels", "metrics"),
            rules.signoff.output.signoff_csv,
        output:
            update(PLAN.comparison_files()),
        params:
            fingerprint=PLAN.campaign_fingerprint("compare"),
        log:
            f"{OUTP}/logs/compare.log",
        benchmark:
            f"{OUTP}/benchmarks/compare.tsv"
        resources:
            mem_mb=PLAN.memory_mb(None, "compare"),
            runtime=PLAN.runtime_min(None, "compare"),
        conda:
            CONDA_ENV,
        shell:
            '"$FLYOVER_PYTHON" -m flyover stage-campaign compare > {log:q} 2>&1'


rule store:
    input:
        PLAN.pass_step_results("levels", "metrics"),
        PLAN.pass_results(SUMMARY_PASS_FILES),
        rules.signoff.output.signoff_csv,
        PLAN.input_files(),
    output:
        update(PLAN.store_files()),
    params:
        fingerprint=PLAN.campaign_fingerprint("store"),
    log:
        f"{OUTP}/logs/store.log",
    benchmark:
        f"{OUTP}/benchmarks/store.tsv"
    resources:
        mem_mb=PLAN.memory_mb(None, "store"),
        runtime=PLAN.runtime_min(None, "store"),
    conda:
        CONDA_ENV,
    shell:
        '"$FLYOVER_PYTHON" -m flyover stage-campaign store > {log:q} 2>&1'


rule viewer:
    input:
        PLAN.pass_step_results("align", "image", "levels", "tones", "narrowband", "listen"),
        rules.signoff.output.signoff_csv,
        PLAN.input_files(),
    output:
        **outputs("viewer"),
    params:
        fingerprint=PLAN.campaign_fingerprint("viewer"),
    log:
        f"{OUTP}/logs/viewer.log",
    benchmark:
        f"{OUTP}/benchmarks/viewer.tsv"
    resources:
        mem_mb=PLAN.memory_mb(None, "viewer"),
        runtime=PLAN.runtime_min(None, "viewer"),
    conda:
        CONDA_ENV,
    shell:
        '"$FLYOVER_PYTHON" -m flyover stage-campaign viewer > {log:q} 2>&1'


rule report:
    input:
        rules.campaign_summary.output,
        rules.hemispheres.output,
        rules.signoff.output,
        rules.viewer.output,
        PLAN.pass_step_results("align", "image", "qc", "levels", "metrics", "tones",
                               "narrowband", "listen", "page"),
        PLAN.comparison_files(),
        PLAN.input_files(),
    output:
        **outputs("report"),
    params:
        fingerprint=PLAN.campaign_fingerprint("report"),
    log:
        f"{OUTP}/logs/report.log",
    benchmark:
        f"{OUTP}/benchmarks/report.tsv"
    resources:
        mem_mb=PLAN.memory_mb(None, "report"),
        runtime=PLAN.runtime_min(None, "report"),
    conda:
        CONDA_ENV,
    shell:
        '"$FLYOVER_PYTHON" -m flyover stage-campaign report > {log:q} 2>&1'
