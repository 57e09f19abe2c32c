"""The workstation queue: job files handed to a durable SQLite queue and run by workers.

A thin shell around :func:`sevenfold.runner.run_job`; the numerical core never imports it.

* :mod:`.home`     where a queue lives and how its folders are laid out; timing settings
* :mod:`.db`       :class:`~.db.Queue`: every state change, each one short transaction, from
                  :mod:`.schema`, :mod:`.connection`, :mod:`.queries`, :mod:`.runs`, :mod:`.actions`
* :mod:`.sweep`    ``[sweep]`` tables expanded into one job table per combination
* :mod:`.submit`   validation and the snapshot of a job file and the inputs it names
* :mod:`.worker`   slots, each with a long-lived child process; heartbeats, cancel, limits
                  (a slot's thread :mod:`.slot`, its child's process and channel :mod:`.child_process`)
* :mod:`.child`    the process that runs jobs for one slot
* :mod:`.cluster`  ``worker --cluster``: the same claims, each job a task on a Dask cluster
                  (the task, run on a Dask worker: :mod:`.cluster_task`)
* :mod:`.watch`    convergence rate, remaining iterations and a terminal plot
* :mod:`.commands` the ``submit list show watch log cancel retry worker`` subcommands
"""
