"""Import of stacked decays from other systems: decay CSV + system TOML -> gated soundings.

docs/import.md describes both formats; :func:`tem.importer.stage.run` is the
stage's one door (``tem import``), :func:`tem.importer.export.write_decays`
writes gated soundings back in the import format (``tem decays``).
"""
