"""Declared column specs for every data file of the programme folder.

One :class:`FileSpec` per file, one :class:`Column` per column. The reader applies these
specs; the README's data-format section and a test check that every column is documented.

Conventions of the loaded DataFrames (what every computation module may rely on):

* column names are lower-case, exactly as named here; unknown columns are kept (warned)
  as categorical text (stripped like text columns; compare with ``==`` or ``.astype(object)``);
* ``_row`` (int) is the line number of the record in its source file (header = line 1);
* ``id``/``text`` columns hold Python ``str``; a blank cell is ``""``;
* ``choice`` columns are ``pd.Categorical``: each cell in its declared spelling (matched
  without regard to case: ``L``/``R``, ``M``/``F``, ``personal``, ...), ``""`` for a blank
  or rejected cell. The categories are always the declared choices plus ``""`` in text
  order (:attr:`Column.categories`), whatever the file holds, so sorting by the column
  sorts as its text and tables of one file concatenate with one dtype. Compare with
  ``==``/``.eq``/``isin``; read codes and categories (``frames.text_codes``) rather than
  turning every row into text; ``.astype(object)`` before ``map(...).fillna(...)``,
  ``replace`` or ``.str``; group on such a column only with ``observed=True`` given;
* ``date`` columns are ``datetime64[ns]`` (``NaT`` when blank); ``datetime`` likewise;
* ``float``/``level``/``hours`` columns are ``float64`` (``NaN`` when blank);
* ``int`` columns are ``float64`` too (so blanks stay ``NaN``); cast where needed;
* hearing-level columns ``hl_<f>`` are ``float64`` dB HL, ``NaN`` when not tested *or* no
  response; a companion bool column ``nr_<f>`` is True where the cell said ``NR``
  (no response at the audiometer's limit: a censored value, never a number);
* people.birth_date accepts a date or a bare year; a bare year is read as 1 July of
  that year and ``birth_year`` (float) is added.
"""
from __future__ import annotations

from dataclasses import dataclass, field

#: Audiometric test frequencies (Hz) of audiograms.csv, in order.
AUDIO_FREQS = (500, 1000, 2000, 3000, 4000, 6000, 8000)
#: Octave-band centres (Hz) accepted as ``oct_<f>`` columns of noise.csv.
OCTAVE_BANDS = (63, 125, 250, 500, 1000, 2000, 4000, 8000)
#: Booth octave-band columns ``ob_<f>`` of audiometers.csv (29 CFR 1910.95 App. D).
BOOTH_BANDS = (500, 1000, 2000, 4000, 8000)

#: Physical bounds for A-weighted levels read from files (dB). Below 0 or above 160 dB
#: is not a workplace sound level.
LEVEL_MIN, LEVEL_MAX = 0.0, 160.0
#: Peak C-weighted levels (dB).
PEAK_MIN, PEAK_MAX = 0.0, 200.0
#: Hearing levels (dB HL) accepted in audiograms.
HL_MIN, HL_MAX = -10.0, 120.0


@dataclass(frozen=True)
class Column:
    """One declared column of a data file."""

    name: str
    kind: str  # id | text | choice | date | datetime | date_or_year | float | int | level | hl | hours
    required: bool = False
    doc: str = ""
    lo: float | None = None
    hi: float | None = None
    #: lower bound excluded (e.g. durations must be > 0)
    lo_open: bool = False
    choices: tuple[str, ...] = ()
    default: str | float | None = None
    #: (file, column) this column must match, e.g. ("people", "person_id")
    ref: tuple[str, str] | None = None
    #: never published on public pages
    private: bool = False
    #: dates in this column may not lie in the future
    past_only: bool = True

    @property
    def categories(self) -> tuple[str, ...]:
        """The categories of a loaded ``choice`` column: the declared choices and ``""`` (a
        blank or rejected cell), in text order, so sorting by the column sorts as its text."""
        return tuple(sorted(set(self.choices) | {""}))


@dataclass(frozen=True)
class FileSpec:
    """One data file of the programme folder."""

    name: str
    path: str  # relative to the programme folder, with the .csv suffix (.xlsx also read)
    doc: str
    columns: tuple[Column, ...]
    required: bool = False
    #: columns that together must be unique (duplicates are errors)
    key: tuple[str, ...] = ()
    extra_columns: tuple[str, ...] = field(default=())

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(name)

    @property
    def required_columns(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns if c.required)


def _hl_columns() -> tuple[Column, ...]:
    return tuple(Column(f"hl_{f}", "hl", doc=f"hearing threshold at {f} Hz, dB HL; `NR` = no response;"
                        " blank = not tested", lo=HL_MIN, hi=HL_MAX) for f in AUDIO_FREQS)


def _oct_columns() -> tuple[Column, ...]:
    return tuple(Column(f"oct_{f}", "level", doc=f"unweighted octave-band Leq at {f} Hz, dB",
                        lo=LEVEL_MIN, hi=LEVEL_MAX) for f in OCTAVE_BANDS)


def _att_columns() -> tuple[Column, ...]:
    return tuple(Column(f"att_{f}", "float", doc=f"mean attenuation at {f} Hz from the ISO 4869-1 test, dB "
                        "(octave-band method)", lo=-10, hi=80) for f in OCTAVE_BANDS) + tuple(
        Column(f"sd_{f}", "float", doc=f"standard deviation of the attenuation at {f} Hz, dB",
               lo=0, hi=40) for f in OCTAVE_BANDS)


def _booth_columns() -> tuple[Column, ...]:
    return tuple(Column(f"ob_{f}", "level", doc=f"booth background octave-band level at {f} Hz, dB",
                        lo=-20.0, hi=LEVEL_MAX) for f in BOOTH_BANDS)


PEOPLE = FileSpec(
    "people", "data/people.csv", "Everyone in the records, one row per person.",
    (
        Column("person_id", "id", True, "the employer's identifier (never published)", private=True),
        Column("group", "id", True, "similar exposure group", ref=("groups", "group")),
        Column("sex", "choice", doc="`M`, `F` or blank (blank: no age correction)", choices=("M", "F", "")),
        Column("birth_date", "date_or_year", doc="date or year of birth (never published)", private=True),
        Column("hire_date", "date", doc="start of employment"),
        Column("leave_date", "date", doc="end of employment (an exit audiogram is due)"),
        Column("department", "text", doc="department"),
        Column("job_title", "text", doc="job title"),
        Column("name", "text", doc="name (never published)", private=True),
    ),
    required=True, key=("person_id",),
)

GROUPS = FileSpec(
    "groups", "data/groups.csv", "Similar exposure groups (SEG).",
    (
        Column("group", "id", True, "group code used in the other files"),
        Column("name", "text", doc="readable name"),
        Column("description", "text", doc="work done, noise sources"),
        Column("shift_hours", "hours", doc="nominal shift length Te in hours (default 8)", lo=0, hi=24,
               lo_open=True, default=8.0),
        Column("days_per_week", "float", doc="working days per week (default 5)", lo=0, hi=7,
               lo_open=True, default=5.0),
    ),
    key=("group",),
)

NOISE = FileSpec(
    "noise", "data/noise.csv", "Noise measurement results (personal dosimetry and area surveys).",
    (
        Column("measurement_id", "id", True, "unique id; names data/noise_logs/ID.csv when logged"),
        Column("date", "date", True, "date of the measurement"),
        Column("kind", "choice", True, "`personal` or `area`", choices=("personal", "area")),
        Column("person_id", "id", doc="person measured (personal)", ref=("people", "person_id"), private=True),
        Column("group", "id", doc="similar exposure group (defaults to the person's)", ref=("groups", "group")),
        Column("location", "text", doc="where (area) or work area (personal)"),
        Column("duration_h", "hours", True, "run time in hours", lo=0, hi=24, lo_open=True),
        Column("laeq", "level", True, "A-weighted equivalent level over the run, dB(A)", lo=LEVEL_MIN, hi=LEVEL_MAX),
        Column("lcpeak", "level", doc="C-weighted peak, dB(C)", lo=PEAK_MIN, hi=PEAK_MAX),
        Column("lceq", "level", doc="C-weighted equivalent level over the run, dB(C) (for the SNR, HML "
               "and C-weighted NRR protector methods)", lo=LEVEL_MIN, hi=LEVEL_MAX),
        Column("instrument_class", "int", doc="1 or 2 (IEC 61672-1); personal exposimeters count as 2",
               lo=1, hi=2),
        Column("osha_dose_pct", "float", doc="OSHA dose as reported by the dosimeter, %", lo=0, hi=100000),
        Column("osha_twa", "level", doc="OSHA 8-h TWA as reported by the dosimeter, dB(A)", lo=LEVEL_MIN,
               hi=LEVEL_MAX),
        Column("x_m", "float", doc="area position east, metres (noise map)", lo=-1e6, hi=1e6),
        Column("y_m", "float", doc="area position north, metres (noise map)", lo=-1e6, hi=1e6),
        Column("notes", "text", doc="free text"),
    ) + _oct_columns(),
    key=("measurement_id",),
)

NOISE_LOG = FileSpec(
    "noise_log", "data/noise_logs/ID.csv", "Logged time history of one measurement (fixed interval).",
    (
        Column("start", "datetime", True, "start of the interval (ISO date-time)"),
        Column("laeq", "level", True, "A-weighted Leq over the interval, dB(A)", lo=LEVEL_MIN, hi=LEVEL_MAX),
    ),
    key=("start",),
)

TASKS = FileSpec(
    "tasks", "data/tasks.csv", "Task-based samples (ISO 9612 strategy 1), one row per sample.",
    (
        Column("group", "id", True, "similar exposure group", ref=("groups", "group")),
        Column("task", "text", True, "task name"),
        Column("task_hours", "hours", True, "task duration per nominal day, hours", lo=0, hi=24, lo_open=True),
        Column("laeq", "level", True, "A-weighted Leq of the sample, dB(A)", lo=LEVEL_MIN, hi=LEVEL_MAX),
        Column("date", "date", doc="date of the sample"),
        Column("sample_minutes", "float", doc="sample duration, minutes", lo=0, hi=1440, lo_open=True),
        Column("instrument_class", "int", doc="1 or 2; blank = personal exposimeter (2)", lo=1, hi=2),
    ),
)

AUDIOGRAMS = FileSpec(
    "audiograms", "data/audiograms.csv", "Audiograms, one row per person, date and ear.",
    (
        Column("person_id", "id", True, "person tested", ref=("people", "person_id"), private=True),
        Column("date", "date", True, "test date"),
        Column("ear", "choice", True, "`L` or `R`", choices=("L", "R")),
        Column("kind", "choice", doc="`baseline`, `periodic`, `retest` or `exit` (default periodic)",
               choices=("baseline", "periodic", "retest", "exit"), default="periodic"),
    ) + _hl_columns() + (
        Column("quiet_hours", "hours", doc="hours without workplace noise before the test", lo=0, hi=10000),
        Column("audiometer_id", "id", doc="audiometer used", ref=("audiometers", "audiometer_id")),
    ),
    key=("person_id", "date", "ear"),
)

REVIEWS = FileSpec(
    "reviews", "data/reviews.csv", "Decisions of the reviewing audiologist or physician.",
    (
        Column("person_id", "id", True, "person", ref=("people", "person_id"), private=True),
        Column("ear", "choice", True, "`L` or `R`", choices=("L", "R")),
        Column("date", "date", True, "date of the decision"),
        Column("decision", "choice", True, "`revise_baseline`, `confirm_shift`, `cancel_shift`, "
               "`not_work_related` or `refer`",
               choices=("revise_baseline", "confirm_shift", "cancel_shift", "not_work_related", "refer")),
        Column("audiogram_date", "date", doc="audiogram the decision is about"),
        Column("reviewer_role", "text", doc="e.g. audiologist, physician"),
        Column("note", "text", doc="free text (restricted pages only)", private=True),
    ),
)

NOTICES = FileSpec(
    "notices", "data/notices.csv", "Written notices given to workers.",
    (
        Column("person_id", "id", True, "person", ref=("people", "person_id"), private=True),
        Column("date", "date", True, "date the notice was given"),
        Column("about", "text", doc="e.g. sts, results"),
    ),
)

TRAINING = FileSpec(
    "training", "data/training.csv", "Training records.",
    (
        Column("person_id", "id", True, "person", ref=("people", "person_id"), private=True),
        Column("date", "date", True, "date of the training"),
        Column("topic", "text", doc="topic"),
    ),
)

PROTECTORS = FileSpec(
    "protectors", "data/protectors.csv", "Protector catalogue with ratings.",
    (
        Column("protector_id", "id", True, "protector code"),
        Column("type", "choice", True, "`earmuff`, `foam_plug`, `premolded_plug`, `canal_cap`, "
               "`custom_plug` or `other`",
               choices=("earmuff", "foam_plug", "premolded_plug", "canal_cap", "custom_plug", "other")),
        Column("nrr", "float", doc="noise reduction rating (US EPA label), dB", lo=0, hi=50),
        Column("snr", "float", doc="single number rating (ISO 4869-2), dB", lo=0, hi=50),
        Column("h", "float", doc="HML H value, dB", lo=0, hi=50),
        Column("m", "float", doc="HML M value, dB", lo=0, hi=50),
        Column("l", "float", doc="HML L value, dB", lo=0, hi=50),
        Column("name", "text", doc="catalogue name"),
    ) + _att_columns(),
    key=("protector_id",),
)

PROTECTOR_FITS = FileSpec(
    "protector_fits", "data/protector_fits.csv", "Who wears what, with fit-test results.",
    (
        Column("person_id", "id", True, "person", ref=("people", "person_id"), private=True),
        Column("protector_id", "id", True, "protector", ref=("protectors", "protector_id")),
        Column("date", "date", doc="date issued or fitted"),
        Column("par", "float", doc="personal attenuation rating from a fit test, dB", lo=-10, hi=60),
    ),
)

AUDIOMETERS = FileSpec(
    "audiometers", "data/audiometers.csv", "Audiometer calibration and booth checks.",
    (
        Column("audiometer_id", "id", True, "audiometer"),
        Column("date", "date", True, "date of the check"),
        Column("check", "choice", True, "`functional`, `acoustic`, `exhaustive` or `booth`",
               choices=("functional", "acoustic", "exhaustive", "booth")),
        Column("result", "choice", doc="`pass` or `fail`", choices=("pass", "fail", "")),
    ) + _booth_columns(),
)

#: Ears of a wide audiogram file (one row per test, both ears side by side): suffix -> ear.
WIDE_EARS = (("l", "L"), ("r", "R"))
#: Hearing-level columns of a wide audiogram file: ``hl_<f>_l`` and ``hl_<f>_r``.
WIDE_HL_COLUMNS = tuple(f"hl_{f}_{e}" for e, _ in WIDE_EARS for f in AUDIO_FREQS)


def wide_audiograms() -> FileSpec:
    """Return the declaration of a wide audiogram file: AUDIOGRAMS without ``ear``, each
    ``hl_<f>`` once per ear as ``hl_<f>_l`` and ``hl_<f>_r`` (one row per test)."""
    cols: list[Column] = []
    for c in AUDIOGRAMS.columns:
        if c.name == "ear":
            continue
        if c.kind == "hl":
            if c.name == "hl_" + str(AUDIO_FREQS[0]):
                for e, ear in WIDE_EARS:
                    cols += [Column(f"hl_{f}_{e}", "hl", doc=f"{'left' if ear == 'L' else 'right'} ear at {f} Hz, "
                                    "dB HL; `NR` = no response; blank = not tested", lo=HL_MIN, hi=HL_MAX)
                             for f in AUDIO_FREQS]
            continue
        cols.append(c)
    return FileSpec(AUDIOGRAMS.name, AUDIOGRAMS.path, "Audiograms, one row per person and date with both ears "
                    "side by side.", tuple(cols))


#: Every tabular file, in load order (referenced files first).
FILES: tuple[FileSpec, ...] = (
    GROUPS, PEOPLE, AUDIOMETERS, PROTECTORS, NOISE, TASKS, AUDIOGRAMS, REVIEWS, NOTICES,
    TRAINING, PROTECTOR_FITS,
)
BY_NAME = {f.name: f for f in FILES + (NOISE_LOG,)}
