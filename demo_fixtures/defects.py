"""The invented defect tracker export of the Berthwise team.

Creation times follow a Goel-Okumoto process per component (intensity ``a * b * exp(-b t)``, t in weeks since
the first day) plus a second, faster-decaying process of the same form that starts at the big release (the
defect surge). Given the total number of defects, the points of independent Poisson processes are a
multinomial split of that total with times drawn from each process's normalised intensity, which is how they
are drawn here; the total is therefore exact and the ground-truth parameters are those of the processes.

References
----------
.. [1] A. L. Goel and K. Okumoto, "Time-dependent error-detection rate model for software reliability and
   other performance measures", IEEE Transactions on Reliability R-28(3), 1979, pp. 206-211.
"""

from __future__ import annotations

import csv
import io
import math
import random
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta

import numpy as np

from demo_fixtures.defect_texts import (
    CAUSE_REPORTS,
    DEVICES,
    SKIPPERS,
    VESSELS,
    Problem,
    ProblemDrawer,
    report_text,
    reworded,
)
from demo_fixtures.scenario import COMPONENT_INDEX, COMPONENTS, Cause, ScenarioParams
from demo_fixtures.texts import CAUSES, DEFECT_TAGS, PEOPLE

COLUMNS = {
    "key": "Ticket No",
    "title": "Headline",
    "description": "Narrative",
    "created": "Opened On",
    "resolved": "Closed On",
    "status": "State",
    "severity": "Impact",
    "priority": "Urgency",
    "components": "Area",
    "type": "Kind",
    "found_in": "Seen In",
    "fixed_in": "Fixed In",
    "reporter": "Raised By",
    "assignee": "Owner",
    "labels": "Tags",
}
OPEN_STATUSES = ("New", "Triaged", "In Progress", "In Review")
CLOSED_STATUSES = ("Done", "Won't Fix", "Duplicate", "Cannot Reproduce")
SEVERITY_ORDER = ("Cosmetic", "Minor", "Major", "Critical", "Blocker")
PRIORITY_ORDER = ("Low", "Normal", "High", "Immediate")
KINDS = ("Bug", "Crash", "Performance", "Data issue", "Usability")
DATE_FORMAT = "%Y-%m-%d %H:%M"
DAYS_TO_CLOSE = {
    "Cosmetic": 45.0,
    "Minor": 25.0,
    "Major": 12.0,
    "Critical": 5.0,
    "Blocker": 2.0,
}


def column_map() -> dict[str, object]:
    """The column map of this export, in the format Barometer's defect import reads."""
    return {
        "name": "harbour-desk-export",
        "fields": dict(COLUMNS),
        "closed_statuses": list(CLOSED_STATUSES),
        "open_statuses": list(OPEN_STATUSES),
        "severity_order": list(SEVERITY_ORDER),
        "priority_order": list(PRIORITY_ORDER),
        "multi_value_delimiter": ";",
        "date_format": None,
    }


@dataclass
class Release:
    version: str
    day: date


def releases_for(params: ScenarioParams) -> tuple[list[Release], int]:
    """A release every two weeks; the one nearest 55 % of the history is the big one (index returned)."""
    days = [params.start_date + timedelta(days=3 + 14 * k) for k in range(params.n_days // 14 + 1)]
    days = [d for d in days if d <= params.end_date]
    target = params.start_date + timedelta(days=round(params.n_days * 0.55))
    big = min(range(len(days)), key=lambda i: (abs((days[i] - target).days), i))
    out = []
    for i, d in enumerate(days):
        out.append(Release(f"7.{i}.0" if i < big else f"8.{i - big}.0", d))
    return out, big


@dataclass
class Defect:
    created: datetime
    component: int
    surge: bool
    problem: Problem | None = None
    vessel: str = ""
    skipper: str = ""
    device: str = ""
    wording: tuple[int, int, int] = (0, 0, 0)
    fill: dict[str, str] = field(default_factory=dict)
    headline: str = ""
    narrative: str = ""
    extra_components: list[str] = field(default_factory=list)
    area_alias: bool = False
    key: str = ""
    status: str = ""
    resolved: datetime | None = None
    severity: str = ""
    priority: str = ""
    kind: str = ""
    found_in: str = ""
    fixed_in: str = ""
    reporter: str = ""
    assignee: str = ""
    tags: list[str] = field(default_factory=list)


@dataclass
class DefectExport:
    csv_text: str
    inflow: dict[str, object]
    duplicates: list[dict[str, str]]
    cause_matches: list[dict[str, str]]
    count: int


# Sizes of the earlier text model's tables. Its draws are still made (and ignored), so that for a given seed
# every column but the texts stays as it was; the texts come from a stream of their own.
_OLD_HEADLINES = {
    "Booking API": 6,
    "Payments": 5,
    "Berth Sensors": 4,
    "Mobile App": 5,
    "Notifications": 4,
    "Harbour-Master Reports": 5,
}
_OLD_NARRATIVES = 4
_OLD_STEPS = 7
_OLD_THINGS = 7


def _truncated_exponential(rng: np.random.Generator, b: float, horizon: float, size: int) -> np.ndarray:
    u = rng.random(size)
    return -np.log1p(-u * (1.0 - math.exp(-b * horizon))) / b


def _fill(rnd: random.Random) -> dict[str, str]:
    return {
        "berth": f"{rnd.choice('ABCDEFGH')}-{rnd.randint(1, 48):02d}",
        "n": str(rnd.randint(2, 14)),
        "amount": f"EUR {rnd.randint(20, 900)}.{rnd.randint(0, 99):02d}",
        "node": f"sensor-{rnd.choice('ABCDEFGH')}{rnd.randint(1, 48):02d}",
        "step": str(rnd.randrange(_OLD_STEPS)),  # draws of the earlier text model, see _OLD_HEADLINES
        "thing": str(rnd.randrange(_OLD_THINGS)),
        "p": rnd.choice("ABCDEFGH"),
        "k": str(rnd.randint(1, 9)),
        "booking": f"BK-2026-{rnd.randint(1, 99999):05d}",
        "used": str(rnd.choice((20, 24, 32))),
        "crc_a": f"0x{rnd.getrandbits(32):08X}",
        "crc_b": f"0x{rnd.getrandbits(32):08X}",
        "token": f"{rnd.getrandbits(32):08x}...{rnd.getrandbits(16):04x}",
        "ip": f"10.{rnd.randint(0, 40)}.{rnd.randint(0, 255)}.{rnd.randint(2, 254)}",
        "emu": f"emulator-{rnd.choice((5554, 5556))}",
    }


def build_defects(
    params: ScenarioParams,
    rnd: random.Random,
    rng: np.random.Generator,
    causes: list[Cause],
) -> DefectExport:
    """Draw the defects, their texts, duplicates and cause-matching reports; render the CSV."""
    start = datetime.combine(params.start_date, datetime.min.time(), tzinfo=UTC)
    end = datetime.combine(params.end_date, datetime.min.time(), tzinfo=UTC) + timedelta(days=1)
    horizon = params.n_days / 7.0
    releases, big = releases_for(params)
    t_release = (releases[big].day - params.start_date).days / 7.0
    n = params.n_defects
    text_rnd = random.Random(f"berthwise-defect-texts/{params.seed}")
    problems = ProblemDrawer(text_rnd)

    base_b = [round(rnd.uniform(0.03, 0.12), 4) for _ in COMPONENTS]
    surge_b = [round(rnd.uniform(0.25, 0.6), 4) for _ in COMPONENTS]
    weights = [c.weight for c in COMPONENTS]
    base_share = [w * (1 - math.exp(-b * horizon)) for w, b in zip(weights, base_b, strict=True)]
    surge_share = [
        w * (1 - math.exp(-b * (horizon - t_release))) for w, b in zip(weights, surge_b, strict=True)
    ]
    k_base = 0.7 * n / sum(base_share)
    k_surge = 0.3 * n / sum(surge_share)
    expected = [k_base * s for s in base_share] + [k_surge * s for s in surge_share]
    counts = rng.multinomial(n, np.array(expected) / sum(expected))
    defects: list[Defect] = []
    for p, count in enumerate(counts):
        ci = p % len(COMPONENTS)
        surge = p >= len(COMPONENTS)
        if surge:
            weeks = t_release + _truncated_exponential(rng, surge_b[ci], horizon - t_release, int(count))
        else:
            weeks = _truncated_exponential(rng, base_b[ci], horizon, int(count))
        for w in weeks:
            # keep the day the process chose, move the time of day into office hours (minutes precision)
            day = start + timedelta(days=math.floor(float(w) * 7.0))
            minute = rnd.randint(7 * 60, 19 * 60)
            defects.append(
                Defect(
                    min(day + timedelta(minutes=minute), end - timedelta(minutes=1)),
                    ci,
                    surge,
                )
            )
    defects.sort(key=lambda d: (d.created, d.component, d.surge))

    for i, d in enumerate(defects):
        comp = COMPONENTS[d.component]
        d.key = f"BW-{1001 + i}"
        rnd.randrange(_OLD_HEADLINES[comp.name])
        d.fill = _fill(rnd)
        rel = [r for r in releases if datetime.combine(r.day, datetime.min.time(), tzinfo=UTC) <= d.created]
        d.found_in = rel[-1].version if rel else "6.9.0"
        rnd.randrange(_OLD_NARRATIVES)
        d.problem = problems.draw(comp.name)
        if text_rnd.random() < 0.8:  # most reports name the customer's boat and skipper
            d.vessel, d.skipper = text_rnd.choice(VESSELS), text_rnd.choice(SKIPPERS)
        d.device = text_rnd.choice(DEVICES)
        d.wording = (text_rnd.randrange(2), text_rnd.randrange(3), text_rnd.randrange(2))
        d.headline, d.narrative = report_text(
            d.problem,
            text_rnd,
            vessel=d.vessel,
            skipper=d.skipper,
            device=d.device,
            version=d.found_in,
            wording=d.wording,
        )
        roll = rnd.random()
        if roll < 0.12:
            other = rnd.choice([c.name for c in COMPONENTS if c.name != comp.name])
            d.extra_components.append(other)
        d.area_alias = rnd.random() < 0.1
        d.severity = rnd.choices(SEVERITY_ORDER, weights=(0.1, 0.35, 0.35, 0.15, 0.05))[0]
        if d.surge and d.severity in ("Cosmetic", "Minor") and rnd.random() < 0.3:
            d.severity = "Major"
        sev_rank = SEVERITY_ORDER.index(d.severity)
        d.priority = PRIORITY_ORDER[max(0, min(3, sev_rank - 1 + rnd.choice((-1, 0, 0, 1))))]
        d.kind = rnd.choices(KINDS, weights=(0.6, 0.12, 0.1, 0.1, 0.08))[0]
        d.reporter = rnd.choice(PEOPLE)
        d.tags = sorted(rnd.sample(DEFECT_TAGS, rnd.choice((0, 0, 1, 1, 2))))

    # duplicates: a later report of the same problem by someone else, reworded, often about the same vessel
    n_dup = max(3, round(n * 0.015))
    used: set[int] = set()
    duplicates: list[dict[str, str]] = []
    tries = 0
    while len(duplicates) < n_dup and tries < 50 * n_dup:
        tries += 1
        i = rnd.randrange(len(defects))
        orig = defects[i]
        cands = [
            j
            for j in range(i + 1, min(len(defects), i + 200))
            if j not in used
            and defects[j].component == orig.component
            and timedelta(hours=6) <= defects[j].created - orig.created <= timedelta(days=20)
        ]
        if i in used or not cands:
            continue
        j = cands[rnd.randrange(len(cands))]
        dup = defects[j]
        used.update((i, j))
        dup.problem, dup.fill = orig.problem, dict(orig.fill)
        if text_rnd.random() < 0.85:  # mostly the same customer complaining again
            dup.vessel, dup.skipper, dup.device = orig.vessel, orig.skipper, orig.device
        assert dup.problem is not None
        dup.wording = reworded(orig.wording, text_rnd)
        dup.headline, dup.narrative = report_text(
            dup.problem,
            text_rnd,
            vessel=dup.vessel,
            skipper=dup.skipper,
            device=dup.device,
            version=dup.found_in,
            wording=dup.wording,
            duplicate=True,
        )
        if dup.reporter == orig.reporter:
            dup.reporter = text_rnd.choice([p for p in PEOPLE if p != orig.reporter])
        if rnd.random() < 0.6:
            dup.status = "Duplicate"
            dup.resolved = min(
                dup.created + timedelta(hours=rnd.randint(2, 72)),
                end - timedelta(minutes=1),
            )
        duplicates.append({"original": orig.key, "duplicate": dup.key})

    # reports whose text matches a failure cause seen in CI
    matches: list[dict[str, str]] = []
    reports_of: dict[str, int] = {}
    for cause in causes:
        spec = CAUSES[cause.spec_index]
        if rnd.random() > 0.75:
            continue
        comps = {COMPONENT_INDEX[c] for c in spec.components}
        first = cause.episodes[0].start
        cands = [
            i
            for i, d in enumerate(defects)
            if i not in used and d.component in comps and first <= d.created <= first + timedelta(days=21)
        ]
        if not cands:
            cands = [i for i, d in enumerate(defects) if i not in used and d.component in comps]
        for i in sorted(rnd.sample(cands, min(len(cands), rnd.randint(1, 3)))):
            d = defects[i]
            used.add(i)
            # the first report uses the cause's own words; further ones describe other consequences
            nth = reports_of.get(spec.id, 0)
            reports_of[spec.id] = nth + 1
            variants = ((spec.defect_headline, spec.defect_narrative), *CAUSE_REPORTS[spec.id])
            headline, narrative = variants[nth % len(variants)]
            d.headline = headline
            d.narrative = narrative.format_map(d.fill)
            d.kind = "Bug"
            matches.append({"defect": d.key, "cause": spec.id})

    # life cycle
    for d in defects:
        if not d.status:
            ttc = timedelta(days=rnd.expovariate(1.0 / DAYS_TO_CLOSE[d.severity]))
            closed_at = d.created + ttc + timedelta(minutes=rnd.randint(5, 600))
            if closed_at < end:
                d.resolved = closed_at
                d.status = rnd.choices(
                    ("Done", "Won't Fix", "Cannot Reproduce"),
                    weights=(0.87, 0.07, 0.06),
                )[0]
            elif end - d.created < timedelta(days=2):
                d.status = "New"
            else:
                d.status = rnd.choices(("Triaged", "In Progress", "In Review", "New"), weights=(4, 3, 2, 1))[
                    0
                ]
        if d.status == "Done" and d.resolved is not None:
            after = [
                r for r in releases if datetime.combine(r.day, datetime.min.time(), tzinfo=UTC) >= d.resolved
            ]
            d.fixed_in = after[0].version if after else "next"
        if d.status != "New":
            d.assignee = rnd.choice(PEOPLE)

    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(list(COLUMNS.values()))
    for d in defects:
        comp = COMPONENTS[d.component]
        area = comp.aliases[rnd.randrange(len(comp.aliases))] if d.area_alias else comp.name
        writer.writerow(
            [
                d.key,
                d.headline,
                d.narrative,
                d.created.strftime(DATE_FORMAT),
                d.resolved.strftime(DATE_FORMAT) if d.resolved else "",
                d.status,
                d.severity,
                d.priority,
                "; ".join([area, *d.extra_components]),
                d.kind,
                d.found_in,
                d.fixed_in,
                d.reporter,
                d.assignee,
                "; ".join(d.tags),
            ]
        )

    def weekly(a: float, b: float) -> dict[str, float]:
        return {"a": round(a, 3), "b": b}

    inflow = {
        "model": "Goel-Okumoto mean value m(t) = a * (1 - exp(-b t)); t in weeks",
        "time_unit": "week",
        "origin": params.start_date.isoformat(),
        "horizon_weeks": round(horizon, 4),
        "component_counted_by": "first value of the Area column (after alias resolution)",
        "components": [
            {"component": c.name, **weekly(k_base * w, b)}
            for c, w, b in zip(COMPONENTS, weights, base_b, strict=True)
        ],
        "release": {
            "version": releases[big].version,
            "date": releases[big].day.isoformat(),
            "t_weeks": round(t_release, 4),
        },
        "surge": [
            {"component": c.name, **weekly(k_surge * w, b)}
            for c, w, b in zip(COMPONENTS, weights, surge_b, strict=True)
        ],
        "counts": [
            {
                "component": c.name,
                "base": int(counts[i]),
                "surge": int(counts[i + len(COMPONENTS)]),
            }
            for i, c in enumerate(COMPONENTS)
        ],
        "releases": [{"version": r.version, "date": r.day.isoformat()} for r in releases],
    }
    return DefectExport(out.getvalue(), inflow, duplicates, matches, len(defects))
