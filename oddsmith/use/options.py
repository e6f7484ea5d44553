"""The choices of the scoring options, apart from the scoring code so that the command line
can offer them without importing it (:mod:`oddsmith.use.score` applies them)."""

#: What a feature's contribution (reason code) is measured against.
REFERENCES = ("training_mean", "most_favourable")
#: What to do with columns of a scored file that the data contract does not declare.
EXTRA_COLUMN_POLICIES = ("reject", "ignore")
