# oddsmith workflow: validate → split → features → fit (one job per candidate) → compare
# → threshold → evaluate → apply_cutoff → figures → manifest → card. See DEVELOPERS.md for the map.
from snakemake.utils import min_version

min_version("9.0")


configfile: "config/config.yaml"


include: "rules/common.smk"
include: "rules/validate.smk"
include: "rules/split.smk"
include: "rules/fit.smk"
include: "rules/decide.smk"
include: "rules/challenger.smk"
include: "rules/score.smk"
include: "rules/manifest.smk"
include: "rules/card.smk"


rule all:
    input:
        f"results/{RUN}/card/model_card.pdf",
        f"results/{RUN}/card/card.sha256",
        SCORING_OUTPUTS,
