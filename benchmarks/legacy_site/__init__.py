"""The site modules as they were before the throughput work of issue 12 (batch, chunks,
boring, run: copies of transport/site/ at commit 3123fd7, imports made relative), kept
so that benchmarks/bench_site.py can run the previous implementation in the same
process as the current one. Not part of the package; not maintained beyond that use.
"""
