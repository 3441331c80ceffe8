"""Workflows: the glue that runs one job end to end over storage, dsp and analysis.

Each module is one job a face asks for; none of them draws or formats anything.

pipeline    -- ``process_run``: load a stored run, track orders, find and judge the
               criticals, save every result in one write transaction
findings    -- analysis results of one run -> the findings JSON (``rundash.findings/1``)
comparison  -- stored 1X vectors of several runs -> the comparison JSON
               (``rundash.comparison/1``), with bootstrap uncertainties
live        -- the live monitor: incremental processing while the recorder writes a run
batch       -- ``process_run`` over many runs on a Dask cluster
demo        -- import and process the bundled sample runs
"""
