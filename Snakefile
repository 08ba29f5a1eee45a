# flyover campaign workflow.
#   snakemake --cores 2                                  the built-in demo campaign
#   snakemake --cores 2 --configfile my-campaign.yaml    your campaign, and only it
#   flyover run my-campaign.yaml                         the same through flyover's wrapper
# The rules live in the package (flyover/workflow/rules/) so that `flyover run` has them when
# installed; they call flyover's stage entry points and hold no physics.

include: "flyover/workflow/rules/main.smk"

# Includes do not set the default target; this rule makes `snakemake` without targets run all.
rule campaign:
    default_target: True
    input:
        rules.all.input,


localrules: campaign
