# The flyover workflow (included by the top-level Snakefile; `flyover run` uses this file
# directly). Rules call stage entry points and hold no physics.

include: "common.smk"


# The first rule is the default target: the whole campaign.
rule all:
    input:
        PLAN.targets(),


localrules: all


include: "demo.smk"
include: "pass.smk"
include: "campaign.smk"
