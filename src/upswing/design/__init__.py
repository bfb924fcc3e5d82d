"""The design run: every stage from rig file to verdict in one call, and the run folder it writes.

Public API::

    run_design(rig_path, options=DesignOptions(...), progress=None) -> DesignRun
    write_run_folder(run, parent) -> RunFolder

Modules: :mod:`.pipeline` (stages, timing, the :class:`DesignRun` result), :mod:`.decision` (the verdict rule and
the margins it judges), :mod:`.responses` (offset and tap responses of the balance loop), :mod:`.swingup_stage` (the
swing-up slot), :mod:`.summary` (``summary.json``), :mod:`.run_folder` (the files).
"""
