"""sortition's tool side: config checks for CI and sample-ratio-mismatch audits of exposure logs.

The command line (`sortition ...`) lives in `audit._cli`; the analysis code
is importable for notebooks and other tools.
"""
