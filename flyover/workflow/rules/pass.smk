# Per-pass steps: align, image, levels, check figures.
#
# Resources (memory, runtime) are computed from the campaign's sizes (flyover.workflow.plan);
# the image step's threads from the cores and the passes still to image (a profile's
# set-threads overrides them). Outputs are flagged update(): Snakemake keeps the previous version in place while a step runs
# and puts it back if the step fails, so a failed run never loses a good result (the stages
# write every file atomically). Each rule's params are the values of the campaign that its
# stage reads (declared in the stage module, enforced when it runs) and a digest of flyover.
#
# Priorities (higher first among the jobs ready to run): the image step, the longest, then the
# chain that follows it, levels -> tones -> narrowband -> page, with the track check beside
# tones. Short steps that nothing waits on (qc, listen, metrics) fill the cores around them:
# an outside-sized pass's steps after imaging took 8.2 s with levels waiting for qc and listen.


rule align:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
    output:
        **outputs("align"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "align"),
    log:
        f"{OUTP}/logs/{{pass_name}}/align.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/align.tsv"
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "align"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "align"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} align --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule image:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        **results_of("align"),
    output:
        **outputs("image"),
        figures=update(directory(f"{OUTP}/{{pass_name}}/{MAP_FIGURES}")),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "image"),
    log:
        f"{OUTP}/logs/{{pass_name}}/image.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/image.tsv"
    threads: PLAN.image_threads(workflow.cores, local=workflow.local_exec)
    priority: 5
    resources:
        mem_mb=lambda w, threads: PLAN.memory_mb(w.pass_name, "image", threads=threads),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "image"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} image --pass {{wildcards.pass_name:q}} --threads {{threads}} > {{log:q}} 2>&1"


rule levels:
    input:
        **results_of("align", "image"),
    output:
        **outputs("levels"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "levels"),
    log:
        f"{OUTP}/logs/{{pass_name}}/levels.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/levels.tsv"
    group:
        "pass_light"
    priority: 4
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "levels"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "levels"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} levels --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule trackcheck:
    input:
        **results_of("align", "levels"),
    output:
        **outputs("trackcheck"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "trackcheck"),
    log:
        f"{OUTP}/logs/{{pass_name}}/trackcheck.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/trackcheck.tsv"
    group:
        "pass_light"
    priority: 2
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "trackcheck"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "trackcheck"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} trackcheck --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule metrics:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        **results_of("align", "levels"),
    output:
        **outputs("metrics"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "metrics"),
    log:
        f"{OUTP}/logs/{{pass_name}}/metrics.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/metrics.tsv"
    group:
        "pass_light"
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "metrics"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "metrics"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} metrics --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule tones:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        **results_of("align", "image", "levels"),
    output:
        **outputs("tones"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "tones"),
    log:
        f"{OUTP}/logs/{{pass_name}}/tones.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/tones.tsv"
    group:
        "pass_light"
    priority: 3
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "tones"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "tones"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} tones --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule narrowband:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        **results_of("align", "image", "tones"),
    output:
        **outputs("narrowband"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "narrowband"),
    log:
        f"{OUTP}/logs/{{pass_name}}/narrowband.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/narrowband.tsv"
    group:
        "pass_light"
    priority: 2
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "narrowband"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "narrowband"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} narrowband --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule listen:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        **results_of("align", "image"),
    output:
        **outputs("listen"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "listen"),
    log:
        f"{OUTP}/logs/{{pass_name}}/listen.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/listen.tsv"
    group:
        "pass_light"
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "listen"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "listen"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} listen --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule qc:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        **results_of("align", "image"),
    output:
        **outputs("qc"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "qc"),
    log:
        f"{OUTP}/logs/{{pass_name}}/qc.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/qc.tsv"
    group:
        "pass_light"
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "qc"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "qc"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} qc --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"


rule page:
    input:
        **results_of("align", "image", "levels", "metrics", "tones", "narrowband", "qc"),
    output:
        **outputs("page"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "page"),
    log:
        f"{OUTP}/logs/{{pass_name}}/page.log",
    benchmark:
        f"{OUTP}/benchmarks/{{pass_name}}/page.tsv"
    group:
        "pass_light"
    priority: 1
    resources:
        mem_mb=lambda w: PLAN.memory_mb(w.pass_name, "page"),
        runtime=lambda w: PLAN.runtime_min(w.pass_name, "page"),
    conda:
        CONDA_ENV,
    shell:
        f"{STAGE} page --pass {{wildcards.pass_name:q}} > {{log:q}} 2>&1"
