"""What is written and shown: result records, figures, HTML reports, terminal text, and the one staged writer
with its manifests.

May import ``posterior``, ``inputs`` and ``physics``.
"""
