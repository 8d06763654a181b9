"""The store's tables, as SQLAlchemy 2 Core metadata (dialect-neutral: SQLite and PostgreSQL).

Keys are compact on purpose: a reading is keyed by ``(channel_id, ts_s)`` where ``ts_s`` is
integer UTC epoch seconds of the **interval start** (ingest converts every logger's
convention to this), and ``channel_id`` is one quantity of one device. Since v6 the readings
are stored packed, one row per channel and UTC day (``reading_day``, see :mod:`db.daypack`);
only :mod:`db.readings` reads or writes that table.

Each topic owns its block below; add columns there and bump ``SCHEMA_VERSION`` with a
forward step in :mod:`db.migrate`.
"""

from __future__ import annotations

import sqlalchemy as sa

SCHEMA_VERSION = 9  # 2: daily_inverter.e_ac_pr_kwh (#4); 3: plain-word degradation method names (#10);
#                    4: reading.interval_s, channel.sampling/input_id (#11);
#                    5: site model: daily bases, optional commissioning/module sensor (#11);
#                    6: readings packed per channel and UTC day, table reading_day (#16);
#                    7: per-day sensor judgements in flag_day (#16);
#                    8: inverters' daily flag inputs packed per device, flag_day_pack (#16);
#                    9: the flags job's packed copy of daily columns, flag_daily_pack (#16)

metadata = sa.MetaData()

schema_version = sa.Table(
    "schema_version", metadata,
    sa.Column("version", sa.Integer, primary_key=True),
    sa.Column("applied_utc", sa.String(32), nullable=False),
    sa.Column("note", sa.Text),
)

# ---------------------------------------------------------------- plant
site = sa.Table(
    "site", metadata,
    sa.Column("site_id", sa.String(64), primary_key=True),
    sa.Column("name", sa.Text, nullable=False),
    sa.Column("owner", sa.Text),
    sa.Column("timezone", sa.String(64), nullable=False),
    sa.Column("latitude_deg", sa.Float, nullable=False),
    sa.Column("longitude_deg", sa.Float, nullable=False),
    sa.Column("altitude_m", sa.Float, nullable=False),
    sa.Column("tilt_deg", sa.Float, nullable=False),
    sa.Column("azimuth_deg", sa.Float, nullable=False),
    sa.Column("albedo", sa.Float, nullable=False),
    sa.Column("config_toml", sa.Text, nullable=False),  # the whole file, as last loaded
    sa.Column("config_sha256", sa.String(64), nullable=False),
    sa.Column("updated_utc", sa.String(32), nullable=False),
)

device = sa.Table(
    "device", metadata,
    sa.Column("device_pk", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), nullable=False),
    sa.Column("device_id", sa.String(64), nullable=False),
    sa.Column("kind", sa.String(16), nullable=False),  # 'inverter' | 'sensor'
    sa.UniqueConstraint("site_id", "device_id", name="uq_device_site_device"),
)

inverter = sa.Table(
    "inverter", metadata,
    sa.Column("device_pk", sa.Integer, sa.ForeignKey("device.device_pk"), primary_key=True),
    sa.Column("p_dc_kwp", sa.Float, nullable=False),
    sa.Column("p_ac_max_kw", sa.Float, nullable=False),
    sa.Column("gamma_pmp_per_c", sa.Float, nullable=False),
    sa.Column("eta_inv_nom", sa.Float, nullable=False),
    sa.Column("mounting", sa.String(48), nullable=False),
    sa.Column("commissioned", sa.Date),  # v3: None when unknown (#11)
    # the irradiance sensor of the inverter's (first) array: POA or, since v3, GHI (#11)
    sa.Column("poa_sensor_id", sa.String(64), nullable=False),
    sa.Column("t_module_sensor_id", sa.String(64)),  # v3: None = modelled cell temperature
    sa.Column("t_amb_sensor_id", sa.String(64)),
    sa.Column("wind_sensor_id", sa.String(64)),
    sa.Column("peer_group", sa.String(64), nullable=False),
)

sensor = sa.Table(
    "sensor", metadata,
    sa.Column("device_pk", sa.Integer, sa.ForeignKey("device.device_pk"), primary_key=True),
    sa.Column("quantity", sa.String(32), nullable=False),
    sa.Column("instrument", sa.String(32)),  # thermopile_pyranometer | reference_cell (POA/GHI)
)

channel = sa.Table(
    "channel", metadata,
    sa.Column("channel_id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("device_pk", sa.Integer, sa.ForeignKey("device.device_pk"), nullable=False),
    sa.Column("quantity", sa.String(32), nullable=False),  # p_ac_kw, poa_wm2, ... (stored unit)
    # v4: "mean" (the value is the mean over its interval) or "instant" (a sample taken at the
    # timestamp; such readings are keyed by the sample's own time, see db.timeseries)
    sa.Column("sampling", sa.String(8), nullable=False, server_default="mean"),
    # v4: an inverter's MPPT input / string group ("" = the whole device)
    sa.Column("input_id", sa.String(64), nullable=False, server_default=""),
    sa.UniqueConstraint("device_pk", "quantity", "input_id", name="uq_channel_device_quantity_input"),
)

# ---------------------------------------------------------------- readings
#: v6 (#16): one row per channel and UTC day ``[day_s, day_s + 86400)`` holding that day's
#: readings packed (db.daypack: timestamps as a run or grid mask, values as exact scaled
#: integers or doubles, each reading's interval and ingest batch). A reading is still keyed
#: by ``(channel_id, ts_s)`` everywhere outside db/: ``ts_s`` is integer UTC epoch seconds of
#: the **interval start** (ingest converts every logger's convention to this). On SQLite this is
#: a rowid table (rows of ~0.2-6 kB stay on their leaf page, which a WITHOUT ROWID b-tree
#: would spill to overflow pages above ~1 kB).
reading_day = sa.Table(
    "reading_day", metadata,
    sa.Column("channel_id", sa.Integer, primary_key=True),
    sa.Column("day_s", sa.BigInteger().with_variant(sa.Integer, "sqlite"), primary_key=True),
    sa.Column("n", sa.Integer, nullable=False),  # readings in the row
    sa.Column("ts_blob", sa.LargeBinary, nullable=False),
    sa.Column("value_blob", sa.LargeBinary, nullable=False),
    # the interval [s] recorded at ingest of every reading of the row (NULL: unknown, loaded
    # before v4, or differing within the day: then runs_blob holds it per reading)
    sa.Column("interval_s", sa.Integer),
    sa.Column("batch_id", sa.Integer, nullable=False),  # the batch that last wrote (latest)
    sa.Column("runs_blob", sa.LargeBinary),  # NULL unless interval or batch differ in the day
)

# ---------------------------------------------------------------- ingest log
ingest_batch = sa.Table(
    "ingest_batch", metadata,
    sa.Column("batch_id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), nullable=False),
    sa.Column("source_name", sa.String(64), nullable=False),
    sa.Column("file_name", sa.Text, nullable=False),
    sa.Column("file_path", sa.Text, nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False),
    sa.Column("size_bytes", sa.BigInteger, nullable=False),
    sa.Column("rows_read", sa.Integer, nullable=False, default=0),
    sa.Column("rows_loaded", sa.Integer, nullable=False, default=0),
    sa.Column("rows_duplicate", sa.Integer, nullable=False, default=0),
    sa.Column("rows_rejected", sa.Integer, nullable=False, default=0),
    sa.Column("values_loaded", sa.Integer, nullable=False, default=0),
    sa.Column("values_duplicate", sa.Integer, nullable=False, default=0),
    sa.Column("values_conflict", sa.Integer, nullable=False, default=0),
    sa.Column("values_rejected", sa.Integer, nullable=False, default=0),
    sa.Column("ts_first_s", sa.BigInteger),
    sa.Column("ts_last_s", sa.BigInteger),
    sa.Column("interval_s", sa.Text),  # e.g. "900" or "900->300" when it changes mid-file
    sa.Column("started_utc", sa.String(32), nullable=False),
    sa.Column("finished_utc", sa.String(32)),
    sa.Column("status", sa.String(16), nullable=False),  # loaded | failed | unchanged
    sa.Column("message", sa.Text),
    sa.Column("notes_json", sa.Text),  # what was done: DST repeats/gaps, counter resets, ...
)

rejected_row = sa.Table(
    "rejected_row", metadata,
    sa.Column("rejected_id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("batch_id", sa.Integer, sa.ForeignKey("ingest_batch.batch_id"), nullable=False,
              index=True),
    sa.Column("line_no", sa.Integer, nullable=False),
    sa.Column("column_name", sa.Text),  # None when the whole line is rejected
    sa.Column("reason", sa.Text, nullable=False),
    sa.Column("raw_text", sa.Text),
)

# ---------------------------------------------------------------- computations
computation = sa.Table(
    "computation", metadata,
    sa.Column("computation_id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), nullable=False),
    sa.Column("kind", sa.String(32), nullable=False),  # daily | flags | degradation
    sa.Column("software_version", sa.String(32), nullable=False),
    sa.Column("params_json", sa.Text, nullable=False),
    sa.Column("started_utc", sa.String(32), nullable=False),
    sa.Column("finished_utc", sa.String(32)),
    sa.Column("scope", sa.Text),  # e.g. "full" or "days 2024-05-01..2024-05-07"
)

# daily_inverter: owned by the analytics-core issue (#4). One row per inverter and day in
# local standard time. Sums are stored so a PR over any period is a ratio of sums.
daily_inverter = sa.Table(
    "daily_inverter", metadata,
    sa.Column("device_pk", sa.Integer, sa.ForeignKey("device.device_pk"), primary_key=True),
    sa.Column("day", sa.Date, primary_key=True),  # local standard time (no DST), see README
    sa.Column("n_intervals", sa.Integer, nullable=False),  # intervals with any reading
    sa.Column("n_daylight", sa.Integer, nullable=False),  # sun above the horizon
    sa.Column("n_valid", sa.Integer, nullable=False),  # passed every filter, enter pi
    sa.Column("e_ac_kwh", sa.Float),  # measured AC energy, all intervals
    sa.Column("h_poa_kwhm2", sa.Float),  # POA insolation, daylight intervals with valid POA
    sa.Column("e_ref_kwh", sa.Float),  # p_dc_kwp * h_poa_kwhm2 / 1 kW/m2 (PR denominator)
    sa.Column("e_ref_stc_kwh", sa.Float),  # sum C_k p_dc_kwp G_k tau_k / 1000, C_k = 1+gamma(T_k-25)
    sa.Column("e_ref_tcell_kwhc", sa.Float),  # sum p_dc_kwp G_k T_cell,k tau_k / 1000 [kWh*degC]
    sa.Column("e_exp_kwh", sa.Float),  # expected AC energy (model), daylight intervals with inputs
    sa.Column("e_ac_valid_kwh", sa.Float),  # measured AC energy over valid intervals
    sa.Column("e_exp_valid_kwh", sa.Float),  # expected AC energy over valid intervals
    sa.Column("pr", sa.Float),  # IEC 61724-1 performance ratio, e_ac_kwh / e_ref_kwh
    sa.Column("pr_stc", sa.Float),  # temperature-corrected to 25 degC cell
    sa.Column("pi", sa.Float),  # performance index e_ac_valid_kwh / e_exp_valid_kwh
    sa.Column("t_cell_wavg_c", sa.Float),  # irradiance-weighted mean cell temperature
    sa.Column("coverage", sa.Float),  # share of the day's insolation with complete, plausible data
    sa.Column("day_valid", sa.Boolean, nullable=False),  # coverage >= minimum: use for trends
    sa.Column("t_daylight_h", sa.Float),  # hours with G >= 50 W/m2 (availability base)
    sa.Column("t_unavailable_h", sa.Float),
    sa.Column("e_lost_kwh", sa.Float),  # expected energy during unavailable intervals
    sa.Column("avail_time", sa.Float),  # time-based availability (fraction)
    sa.Column("avail_energy", sa.Float),  # energy-based availability (fraction)
    sa.Column("t_clipped_h", sa.Float),  # hours at the AC limit
    sa.Column("computation_id", sa.Integer, sa.ForeignKey("computation.computation_id")),
    sa.Column("details_json", sa.Text),  # excluded-interval counts by reason, etc.
    # v2: measured AC energy over the PR set (intervals with a plausible POA reading and an
    # energy value): the numerator matching e_ref_kwh / e_ref_stc_kwh / e_ref_tcell_kwhc.
    # pr = e_ac_pr_kwh / e_ref_kwh; equals e_ac_kwh when no POA reading is missing.
    sa.Column("e_ac_pr_kwh", sa.Float),
    # v3 (#11): where the day's irradiance and cell temperature came from, as codes
    # (ingest.site_model.IRRADIANCE_BASES, analytics.daily.T_CELL_BASES); sums keep their meaning
    sa.Column("irradiance_basis", sa.String(64)),
    sa.Column("t_cell_basis", sa.String(64)),
)

# flag: owned by the flags issue (#5).
flag = sa.Table(
    "flag", metadata,
    sa.Column("flag_id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), nullable=False),
    sa.Column("device_id", sa.String(64)),  # None for a site-wide flag
    sa.Column("kind", sa.String(32), nullable=False),
    sa.Column("start_s", sa.BigInteger, nullable=False),
    sa.Column("end_s", sa.BigInteger, nullable=False),
    sa.Column("severity", sa.String(16), nullable=False),  # info | warning | alarm
    sa.Column("lost_kwh", sa.Float),
    sa.Column("details_json", sa.Text),
    sa.Column("computation_id", sa.Integer, sa.ForeignKey("computation.computation_id")),
    sa.Index("ix_flag_site_kind_start", "site_id", "kind", "start_s"),
)

# flag_part / flag_day: what an incremental flags run needs from earlier runs (#16), so that
# it reads only the new data and a look-back. ``flag_part`` keeps each inverter's own flags
# (outage, clipping, power-channel QA, dropouts, counter and input checks) as its detectors
# gave them, before the site-wide merging that every run redoes; ``flag_day`` keeps the
# per-inverter daily inputs of the whole-history detectors (soiling, underperformance, clock)
# and, since v7, each sensor's judgement of each day (validity, clear-sky ratios, clock offset,
# rain, the ambient-offset samples), so an incremental run judges only the new days.
flag_part = sa.Table(
    "flag_part", metadata,
    sa.Column("part_id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), nullable=False),
    sa.Column("device_id", sa.String(64)),
    sa.Column("kind", sa.String(32), nullable=False),
    sa.Column("start_s", sa.BigInteger, nullable=False),
    sa.Column("end_s", sa.BigInteger, nullable=False),
    sa.Column("severity", sa.String(16), nullable=False),
    sa.Column("lost_kwh", sa.Float),
    sa.Column("details_json", sa.Text),
    sa.Index("ix_flag_part_site_start", "site_id", "start_s"),
)
flag_day = sa.Table(
    "flag_day", metadata,
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), primary_key=True),
    sa.Column("device_id", sa.String(64), primary_key=True),
    sa.Column("day_no", sa.Integer, primary_key=True),  # local standard days since 1970-01-01
    sa.Column("soiling_pi", sa.Float),  # unclipped daily performance index (soiling input)
    sa.Column("withheld_kwh", sa.Float),  # energy withheld by a power limit
    sa.Column("clock_delta_min", sa.Float),  # power-profile centroid minus clear-sky centroid
    sa.Column("clock_clear", sa.Boolean),  # the day counts as clear for the clock check
    # sensors (v7): '' valid, else the reason the day is invalid (before sibling jumps)
    sa.Column("valid_reason", sa.String(32)),
    sa.Column("sky_ratio", sa.Float),  # clear-period ratio to clear-sky POA (drift, level)
    sa.Column("jump_ratio", sa.Float),  # clear-day ratio on the site plane (sibling jumps)
    sa.Column("rain_mm", sa.Float),  # daily rain
    sa.Column("amb_night_c", sa.LargeBinary),  # ambient check: T_amb - T_mod at night (<f8)
    sa.Column("amb_day_c", sa.LargeBinary),  # ambient check: T_mod - T_model in full sun (<f8)
)
# flag_day_pack (v8): the inverters' daily inputs (the first four value columns of flag_day),
# one row per inverter with its days as packed arrays (db.flags), as reading_day packs
# readings: an incremental run reads a whole history of 100 inverters as 100 rows instead of
# ~180 000 (issue #16). Sensors' days stay in flag_day, one row per day.
flag_day_pack = sa.Table(
    "flag_day_pack", metadata,
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), primary_key=True),
    sa.Column("device_id", sa.String(64), primary_key=True),
    sa.Column("n_days", sa.Integer, nullable=False),
    sa.Column("day_no_blob", sa.LargeBinary, nullable=False),  # <i4, ascending
    sa.Column("soiling_pi_blob", sa.LargeBinary, nullable=False),  # <f8, NaN = none
    sa.Column("withheld_kwh_blob", sa.LargeBinary, nullable=False),  # <f8, NaN = none
    sa.Column("clock_delta_min_blob", sa.LargeBinary, nullable=False),  # <f8, NaN = none
    sa.Column("clock_clear_blob", sa.LargeBinary, nullable=False),  # <i1: 1, 0, -1 = none
)

# flag_daily_pack (v9): the daily-table columns the flags job reads for every day (pi,
# validity, energies, availability), one row per inverter with its days packed: a cache that
# db.dailypack trusts only where the daily_inverter rows are provably unchanged since it was
# written (row count and newest computation_id per inverter), else reads the table (#16).
flag_daily_pack = sa.Table(
    "flag_daily_pack", metadata,
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), primary_key=True),
    sa.Column("device_id", sa.String(64), primary_key=True),
    sa.Column("n_days", sa.Integer, nullable=False),
    sa.Column("columns_json", sa.Text, nullable=False),  # packed columns, last computation_id
    sa.Column("day_no_blob", sa.LargeBinary, nullable=False),  # <i4, ascending
    sa.Column("values_blob", sa.LargeBinary, nullable=False),  # <f8 [column][day], NaN = NULL
)

# degradation_result: owned by the degradation issue (#7).
degradation_result = sa.Table(
    "degradation_result", metadata,
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), primary_key=True),
    sa.Column("device_id", sa.String(64), primary_key=True),  # inverter id, or "(site)"
    sa.Column("method", sa.String(32), primary_key=True),
    sa.Column("rate_pct_per_yr", sa.Float),
    sa.Column("ci_low", sa.Float),
    sa.Column("ci_high", sa.Float),
    sa.Column("confidence", sa.Float),
    sa.Column("n_points", sa.Integer),
    sa.Column("reason", sa.Text),  # why not computed, when rate is None
    sa.Column("details_json", sa.Text),
    sa.Column("computation_id", sa.Integer, sa.ForeignKey("computation.computation_id")),
)

# ---------------------------------------------------------------- compute workers (#16)
#: One row per site, created on demand: a worker computing a site holds this row locked
#: (PostgreSQL ``SELECT … FOR UPDATE SKIP LOCKED``) for the whole computation, so two workers
#: never compute the same site at once and a killed worker's lock ends with its connection.
compute_claim = sa.Table(
    "compute_claim", metadata,
    sa.Column("site_id", sa.String(64), sa.ForeignKey("site.site_id"), primary_key=True),
    sa.Column("worker", sa.String(128)),  # the last worker that finished the site
    sa.Column("finished_utc", sa.String(32)),
)
