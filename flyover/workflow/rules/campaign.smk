# Campaign steps: the summary over passes and the report (outputs flagged update(), as in
# pass.smk).


rule signoff:
    input:
        PLAN.pass_results(("alignment.json", "windows.csv", "event_metrics.csv",
                           "reconstructed_metrics.csv", "track_check.json")),
    output:
        table=update(f"{OUTP}/signoff.csv"),
        record=update(f"{OUTP}/signoff.json"),
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
        PLAN.pass_results(("levels.csv",)),
        rules.signoff.output.table,     # rejected passes are left out
    output:
        # Each pass's overall levels sum its label's band range: they follow from all the
        # label's passes, so they are written here.
        pass_overall=update(PLAN.pass_results(("levels_overall.csv",))),
        levels=update(f"{OUTP}/campaign_levels.csv"),
        overall=update(f"{OUTP}/campaign_overall.csv"),
        figure=update(f"{OUTP}/campaign_overall.png"),
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
        PLAN.pass_results(("levels.csv",)),
        rules.signoff.output.table,
    output:
        update([f.replace("{", "{{").replace("}", "}}") for f in PLAN.hemisphere_files()]),
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


rule report:
    input:
        rules.campaign_summary.output,
        rules.hemispheres.output,
        rules.signoff.output,
        PLAN.pass_results(("alignment.json", "windows.csv", "qc_track.png", "qc_spectrogram.png",
                           "spectra.png", "directivity.png", "event_metrics.csv",
                           "level_history.png", "reconstructed_metrics.csv",
                           "rotor_tones.csv", "band_parts.csv", "rotor_tones.png")),
        PLAN.input_files(),
    output:
        update(f"{OUTP}/report.html"),
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
