# oddsmith workflow: validate → split → features → fit (one job per candidate) → compare
# → threshold → evaluate → apply_cutoff (→ refit) → figures → manifest → card → publish. Every job
# writes under work/<run>/; publish copies a complete, verified build to results/<run>/.
# There is no default configuration: name one with --configfile (config/demo.yaml is the
# demo's). See DEVELOPERS.md for the map.
import time

from snakemake.utils import min_version

min_version("9.0")

STARTED = time.time()


include: "rules/common.smk"
include: "rules/validate.smk"
include: "rules/split.smk"
include: "rules/features.smk"
include: "rules/fit.smk"
include: "rules/compare.smk"
include: "rules/challenger.smk"
include: "rules/threshold.smk"
include: "rules/evaluate.smk"
include: "rules/apply_cutoff.smk"
include: "rules/refit.smk"
include: "rules/figures.smk"
include: "rules/score.smk"
include: "rules/manifest.smk"
include: "rules/card.smk"
include: "rules/publish.smk"


rule all:
    input:
        f"work/{artifacts.PUBLISHED_MARKER.format(run=RUN)}",


# Threads, memory and run time of every job from the config's `resources` section (after
# every rule is defined; --set-threads and --set-resources still win).
apply_job_resources()


onsuccess:
    print(f"oddsmith: {after_build(RUN, since=STARTED)}", file=sys.stderr)
    cancel_idle_timers()


onerror:
    print(f"oddsmith: the build failed; {describe_current(RUN)}", file=sys.stderr)
    cancel_idle_timers()
