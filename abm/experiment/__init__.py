"""Experiments: one run, a batch of runs from a design, where runs execute, and the folders that keep them.

:mod:`~abm.experiment.single` simulates and writes one run directory;
:mod:`~abm.experiment.schema` and :mod:`~abm.experiment.design` read
experiment files into design points and common-random-number seeds
(:mod:`~abm.experiment.posterior` draws calibrated unknowns per replication);
:mod:`~abm.experiment.executors` runs :mod:`~abm.experiment.worker` tasks in
this process, a local pool or a Dask cluster; :mod:`~abm.experiment.store`
keeps a batch's folder, :mod:`~abm.experiment.journal` lean simulations'
figures, :mod:`~abm.experiment.out_folder` and :mod:`~abm.experiment.lock`
guard every output folder; :mod:`~abm.experiment.compare` pairs design points
with their baseline, :mod:`~abm.experiment.export` writes tables as CSV or a
workbook, and :mod:`~abm.experiment.budget` refuses plans a machine cannot hold.
"""
