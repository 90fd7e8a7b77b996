"""The fixed choices that the library and the command line share, each declared once.

No imports: ``screening.cli`` builds its option enums from these tuples when it starts, without loading
polars or numpy. The library reads them under its own names: ``schema.UNIT_SYSTEMS``,
``degree_days.METHODS``, ``ddtool.KIND_CHOICES`` and ``ddtool.BY_CHOICES``; ``config`` takes the choices
of ``[reading] date_order`` from :data:`DATE_ORDERS` (plus ``""``, detect).
"""

#: Unit systems of the input files and the outputs (``[analysis] units``, ``--units``).
UNIT_SYSTEMS = ("IP", "SI")
#: The order of day, month and year in slash dates such as 03/04/2025 (``[reading] date_order``, ``--date-order``).
DATE_ORDERS = ("dmy", "mdy", "ymd")
#: How daily degree days are computed (``degree_days.KERNELS``: one kernel per method; ``degree-days --method``).
DEGREE_DAY_METHODS = ("mean", "maxmin", "hourly", "monthly-estimate")
#: ``degree-days --kind``: heating, cooling or both.
DEGREE_DAY_KINDS = ("hdd", "cdd", "both")
#: ``degree-days --by``: one row per day, month, year or period of a periods file.
PERIODS_BY = ("day", "month", "year", "period")
