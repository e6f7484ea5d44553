# Publication: the finished staging build (manifest and card) becomes results/<run> only if
# its copy verifies; a failed, partial or killed build leaves results/<run> as it was.
# `pending` is None in every ordinary state and names the staging card otherwise, so a
# finished build whose publication was interrupted is published by the next invocation.
from oddsmith.evidence.publish import after_build, describe_current, pending

# Read once, before any job runs (a lambda would be evaluated when the job starts, after the
# card is built, and would differ on every build).
PUBLISH_PENDING = pending(RUN)


rule publish:
    input:
        manifest=artifact("manifest.json"),
        card=artifact("card/card.sha256"),
    output:
        marker=f"work/{artifacts.PUBLISHED_MARKER}",
    log:
        "logs/{run}/publish.log",
    benchmark:
        "benchmarks/{run}/publish.tsv"
    localrule: True
    params:
        pending=PUBLISH_PENDING,
        code=code(script="scripts/publish.py"),
    script:
        "../scripts/publish.py"
