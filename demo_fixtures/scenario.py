"""The invented Berthwise scenario: parameters, test catalogue, CI timeline and the faults planted in it.

Nothing here writes files; :mod:`demo_fixtures.generate` turns the scenario into reports and exports. All
randomness comes from one seed, and no clock is read: the history always ends on :data:`END_DATE`.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta

import numpy as np

from demo_fixtures.texts import CAUSES, FLAKY_KINDS, REGRESSION_VALUES, VOCAB

END_DATE = date(2026, 11, 29)

SCALE_PRESETS: dict[str, dict[str, float]] = {
    "demo": {"n_tests": 600, "n_days": 150, "builds_per_day": 5.0, "n_defects": 400},
    "bench": {
        "n_tests": 20_000,
        "n_days": 200,
        "builds_per_day": 15.0,
        "n_defects": 50_000,
        "nightly_every": 3,
        "pr_share": 0.15,
        "merge_share": 0.5,
    },
}


@dataclass(frozen=True, kw_only=True)
class ScenarioParams:
    """Size and seed of the generated history.

    Parameters
    ----------
    seed : int
        Seed of every random draw; the same parameters always give byte-identical files.
    n_tests : int
        Number of distinct test cases across all components.
    n_days : int
        Days of CI history, ending on ``end_date``.
    builds_per_day : float
        Mean number of builds per day, the nightly run included (weekdays busier than weekends).
    n_defects : int
        Number of defects in the export.
    nightly_every : int
        A full nightly run every this many days.
    pr_share : float
        Share of a component's test classes that a pull-request build runs (1.0: all of them); also the
        share of the Booking API suite that a merge build runs besides the merged component.
    merge_share : float
        Share of the merged component's test classes that a main-merge build runs.
    end_date : datetime.date
        Last day of the history.
    """

    seed: int = 7
    n_tests: int = 600
    n_days: int = 150
    builds_per_day: float = 5.0
    n_defects: int = 400
    nightly_every: int = 1
    pr_share: float = 1.0
    merge_share: float = 1.0
    end_date: date = END_DATE

    def __post_init__(self) -> None:
        if self.n_tests < 30:
            raise ValueError(f"n_tests must be at least 30, got {self.n_tests}")
        if self.n_days < 14:
            raise ValueError(f"n_days must be at least 14, got {self.n_days}")
        if self.builds_per_day < 1:
            raise ValueError(f"builds_per_day must be at least 1, got {self.builds_per_day}")
        if self.n_defects < 20:
            raise ValueError(f"n_defects must be at least 20, got {self.n_defects}")
        if self.nightly_every < 1:
            raise ValueError(f"nightly_every must be at least 1, got {self.nightly_every}")
        if not 0 < self.pr_share <= 1:
            raise ValueError(f"pr_share must be in (0, 1], got {self.pr_share}")
        if not 0 < self.merge_share <= 1:
            raise ValueError(f"merge_share must be in (0, 1], got {self.merge_share}")

    @classmethod
    def for_scale(cls, scale: str, **overrides: object) -> ScenarioParams:
        """Parameters of a named scale (``demo`` or ``bench``), with overrides."""
        if scale not in SCALE_PRESETS:
            raise ValueError(f"unknown scale {scale!r}; known: {', '.join(SCALE_PRESETS)}")
        values: dict[str, object] = dict(SCALE_PRESETS[scale])
        values.update({k: v for k, v in overrides.items() if v is not None})
        for key in ("n_tests", "n_days", "n_defects", "nightly_every", "seed"):
            if key in values:
                values[key] = int(values[key])  # type: ignore[call-overload]
        return cls(**values)  # type: ignore[arg-type]

    @property
    def start_date(self) -> date:
        return self.end_date - timedelta(days=self.n_days - 1)


# -- components and test catalogue ---------------------------------------------------------------------------


@dataclass(frozen=True)
class ComponentSpec:
    name: str
    dialect: str  # "surefire", "ant" or "pytest"
    package: str  # classname prefix without the trailing dot
    aliases: tuple[str, ...]
    weight: float
    median_seconds: float

    @property
    def language(self) -> str:
        return "py" if self.dialect == "pytest" else "jvm"


COMPONENTS: tuple[ComponentSpec, ...] = (
    ComponentSpec(
        "Booking API",
        "surefire",
        "io.berthwise.booking",
        ("booking api", "Bookings"),
        0.27,
        0.05,
    ),
    ComponentSpec(
        "Payments",
        "surefire",
        "io.berthwise.payments",
        ("payments", "Payment"),
        0.18,
        0.04,
    ),
    ComponentSpec(
        "Berth Sensors",
        "ant",
        "io.berthwise.sensors.firmware",
        ("sensors", "Berth sensor firmware"),
        0.15,
        0.4,
    ),
    ComponentSpec("Mobile App", "pytest", "mobile_app.tests", ("mobile", "Mobile app"), 0.13, 2.5),
    ComponentSpec(
        "Notifications",
        "pytest",
        "notifications.tests",
        ("notifications", "Notify"),
        0.12,
        0.08,
    ),
    ComponentSpec(
        "Harbour-Master Reports",
        "pytest",
        "harbour_reports.tests",
        ("Harbour master reports", "HM Reports", "reports"),
        0.15,
        0.25,
    ),
)
COMPONENT_INDEX = {c.name: i for i, c in enumerate(COMPONENTS)}
CORE_COMPONENT = 0  # main-merge builds also run the Booking API suite
GROWING_COMPONENT = "Harbour-Master Reports"  # its tests slow down over the months


@dataclass(frozen=True, slots=True)
class TestSpec:
    index: int
    component: int
    class_index: int  # index into Catalogue.classes
    classname: str
    name: str


@dataclass
class Catalogue:
    tests: list[TestSpec]
    classes: list[tuple[int, str, str]]  # (component, suite package, classname)
    component_tests: list[np.ndarray]  # test indices per component
    class_tests: list[np.ndarray]  # test indices per class
    component_classes: list[np.ndarray]  # class indices per component
    base_seconds: np.ndarray


def _camel(words: str) -> str:
    return "".join(w.capitalize() for w in words.split("_") if w)


def _test_name(dialect: str, verb: str, obj: str, cond: str) -> str:
    words = "_".join(w for w in (verb, obj, cond) if w)
    if dialect == "pytest":
        return "test_" + words
    if dialect == "ant":
        return "test" + _camel(words)
    return "should" + _camel(words)


def _split_counts(total: int, weights: list[float]) -> list[int]:
    """Largest-remainder split of ``total`` by ``weights`` (deterministic)."""
    raw = [total * w / sum(weights) for w in weights]
    counts = [math.floor(r) for r in raw]
    order = sorted(range(len(raw)), key=lambda i: (-(raw[i] - counts[i]), i))
    for i in order[: total - sum(counts)]:
        counts[i] += 1
    return counts


def build_catalogue(params: ScenarioParams, rng: np.random.Generator) -> Catalogue:
    """Invent ``params.n_tests`` test cases grouped into classes/modules per component."""
    per_component = _split_counts(params.n_tests, [c.weight for c in COMPONENTS])
    tests: list[TestSpec] = []
    classes: list[tuple[int, str, str]] = []
    base: list[float] = []
    for ci, (comp, count) in enumerate(zip(COMPONENTS, per_component, strict=True)):
        vocab = VOCAB[comp.name]
        combos = [(s, a) for s in vocab["subjects"] for a in vocab["aspects"]]
        order = rng.permutation(len(combos))
        n_classes = max(1, math.ceil(count / 10))
        names_space = len(vocab["verbs"]) * len(vocab["objects"]) * len(vocab["conditions"])
        sizes = 1 + rng.multinomial(count - n_classes, rng.dirichlet(np.full(n_classes, 3.0)))
        sizes = np.minimum(sizes, names_space)
        # give back what the cap removed, one per class in turn
        deficit = count - int(sizes.sum())
        k = 0
        while deficit > 0:
            if sizes[k % n_classes] < names_space:
                sizes[k % n_classes] += 1
                deficit -= 1
            k += 1
        for j in range(n_classes):
            subject, aspect = combos[int(order[j % len(combos)])]
            part = "" if j < len(combos) else f"Part{j // len(combos) + 1}"
            if part and comp.dialect == "pytest":
                part = f"_part{j // len(combos) + 1}"
            if comp.dialect == "pytest":
                classname = f"{comp.package}.{subject}{part}" + (f".{aspect}" if aspect else "")
                suite_pkg = comp.package
            else:
                sub, simple = subject.split(".")
                classname = f"{comp.package}.{sub}.{simple}{aspect}{part}Test"
                suite_pkg = f"{comp.package}.{sub}"
            class_index = len(classes)
            classes.append((ci, suite_pkg, classname))
            picks = rng.choice(names_space, size=int(sizes[j]), replace=False)
            no, nc = len(vocab["objects"]), len(vocab["conditions"])
            for p in sorted(int(x) for x in picks):
                verb, obj, cond = (
                    vocab["verbs"][p // (no * nc)],
                    vocab["objects"][(p // nc) % no],
                    vocab["conditions"][p % nc],
                )
                tests.append(
                    TestSpec(
                        len(tests),
                        ci,
                        class_index,
                        classname,
                        _test_name(comp.dialect, verb, obj, cond),
                    )
                )
                base.append(float(comp.median_seconds * rng.lognormal(0.0, 0.7)))
    comp_arr = np.array([t.component for t in tests])
    cls_arr = np.array([t.class_index for t in tests])
    cls_comp = np.array([c[0] for c in classes])
    return Catalogue(
        tests=tests,
        classes=classes,
        component_tests=[np.flatnonzero(comp_arr == i) for i in range(len(COMPONENTS))],
        class_tests=[np.flatnonzero(cls_arr == j) for j in range(len(classes))],
        component_classes=[np.flatnonzero(cls_comp == i) for i in range(len(COMPONENTS))],
        base_seconds=np.array(base),
    )


# -- CI timeline ---------------------------------------------------------------------------------------------

BRANCH_WORDS = (
    "hold-expiry",
    "refund-rounding",
    "berth-map-cache",
    "tide-banner",
    "quiet-hours",
    "ota-resume",
    "sonar-filter",
    "invoice-pdf",
    "waitlist-offers",
    "dst-fix",
    "pool-size",
    "seasonal-rates",
    "arrival-pass",
    "digest-batching",
    "fuel-dock-report",
    "card-token-refresh",
    "mesh-retry",
    "overstay-charge",
    "a11y-labels",
    "export-csv",
)


@dataclass
class Branch:
    name: str
    component: int
    base_main: int  # index of the main commit it started from
    commits: list[str] = field(default_factory=list)
    merged_main: int | None = None  # index of the main commit its merge created
    pr_builds: int = 0


@dataclass
class Build:
    id: str
    job: str
    branch: str
    commit: str
    started: datetime
    components: tuple[int, ...]
    main_index: int | None  # set for builds on main
    branch_ref: Branch | None  # set for branch builds
    class_subset: np.ndarray | None = None  # class indices, when the build runs part of its components


@dataclass
class Timeline:
    main_commits: list[str]
    main_commit_time: list[datetime]
    branches: list[Branch]
    builds: list[Build]


def _sha(rnd: random.Random) -> str:
    return f"{rnd.getrandbits(160):040x}"


def build_timeline(params: ScenarioParams, rnd: random.Random, catalogue: Catalogue) -> Timeline:
    """Simulate main, short-lived branches and the builds CI ran on them."""
    start = datetime.combine(params.start_date, datetime.min.time(), tzinfo=UTC)
    main_commits = [_sha(rnd)]
    main_time = [start - timedelta(hours=6)]
    branches: list[Branch] = []
    open_branches: list[Branch] = []
    builds: list[Build] = []
    weights = [c.weight for c in COMPONENTS]
    nightly_rate = 1.0 / params.nightly_every
    weekday_lam = max(params.builds_per_day - nightly_rate, 0.0) * 7.0 / (5.0 + 2 * 0.2)
    seq = 4100
    name_uses: dict[str, int] = {}

    def add(
        job: str,
        branch: str,
        commit: str,
        when: datetime,
        comps: tuple[int, ...],
        **kw: object,
    ) -> None:
        nonlocal seq
        seq += 1
        builds.append(Build(f"{job}-{seq}", job, branch, commit, when, comps, **kw))  # type: ignore[arg-type]

    for day in range(params.n_days):
        day_start = start + timedelta(days=day)
        if day % params.nightly_every == params.nightly_every - 1 or params.nightly_every == 1:
            when = day_start + timedelta(hours=2, seconds=rnd.randint(0, 1200))
            add(
                "nightly-full",
                "main",
                main_commits[-1],
                when,
                tuple(range(len(COMPONENTS))),
                main_index=len(main_commits) - 1,
                branch_ref=None,
            )
        lam = weekday_lam * (1.0 if day_start.weekday() < 5 else 0.2)
        n_events = int(np.random.default_rng(rnd.getrandbits(32)).poisson(lam))
        times = sorted(rnd.randint(7 * 3600 + 1800, 19 * 3600 + 1800) for _ in range(n_events))
        for secs in times:
            when = day_start + timedelta(seconds=secs)
            # close branches left alone for more than ten days
            open_branches = [
                b for b in open_branches if (when - main_time[b.base_main]).days < 10 or b.pr_builds < 1
            ]
            mergeable = [b for b in open_branches if b.pr_builds >= 1]
            roll = rnd.random()
            if mergeable and roll < 0.4:
                br = mergeable[rnd.randrange(len(mergeable))]
                open_branches.remove(br)
                main_commits.append(_sha(rnd))
                main_time.append(when)
                br.merged_main = len(main_commits) - 1
                comps = tuple(sorted({br.component, CORE_COMPONENT}))
                subset = None
                if params.merge_share < 1.0 or params.pr_share < 1.0:
                    picked = []
                    for comp in comps:
                        share = params.merge_share if comp == br.component else params.pr_share
                        picked.append(_pick_classes(catalogue, comp, share, rnd))
                    subset = np.sort(np.concatenate(picked))
                add(
                    "main-merge",
                    "main",
                    main_commits[-1],
                    when,
                    comps,
                    main_index=len(main_commits) - 1,
                    branch_ref=None,
                    class_subset=subset,
                )
                continue
            if not open_branches or (len(open_branches) < 6 and roll < 0.75):
                comp = rnd.choices(range(len(COMPONENTS)), weights=weights)[0]
                word = BRANCH_WORDS[rnd.randrange(len(BRANCH_WORDS))]
                kind = rnd.choice(("feature", "feature", "fix", "chore"))
                base_name = f"{kind}/{word}"
                name_uses[base_name] = name_uses.get(base_name, 0) + 1
                name = base_name if name_uses[base_name] == 1 else f"{base_name}-{name_uses[base_name]}"
                br = Branch(name, comp, len(main_commits) - 1)
                branches.append(br)
                open_branches.append(br)
            else:
                br = open_branches[rnd.randrange(len(open_branches))]
            br.commits.append(_sha(rnd))
            br.pr_builds += 1
            subset = None
            if params.pr_share < 1.0:
                subset = np.sort(_pick_classes(catalogue, br.component, params.pr_share, rnd))
            add(
                "pr-checks",
                br.name,
                br.commits[-1],
                when,
                (br.component,),
                main_index=None,
                branch_ref=br,
                class_subset=subset,
            )
    builds.sort(key=lambda b: (b.started, b.id))
    return Timeline(main_commits, main_time, branches, builds)


def _pick_classes(catalogue: Catalogue, comp: int, share: float, rnd: random.Random) -> np.ndarray:
    classes = catalogue.component_classes[comp]
    if share >= 1.0:
        return classes
    k = max(1, round(len(classes) * share))
    return np.random.default_rng(rnd.getrandbits(32)).choice(classes, k, replace=False)


# -- planted faults --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Flaky:
    test: int
    rate: float
    kind: str


@dataclass(frozen=True)
class Regression:
    id: str
    tests: tuple[int, ...]
    intro_main: int  # -1: broken from the first build
    intro_branch: Branch | None
    fix_main: int | None
    fix_branch: Branch | None
    values: tuple[str, str, str]  # (want, got, field)
    template: int

    def active(self, build: Build) -> bool:
        """Whether the code this build ran contains the fault."""
        fix = self.fix_main if self.fix_main is not None else 1 << 60
        if build.main_index is not None:
            return self.intro_main <= build.main_index < fix
        br = build.branch_ref
        assert br is not None
        if br is self.intro_branch:
            return True
        return self.intro_main <= br.base_main < fix and br is not self.fix_branch


@dataclass(frozen=True)
class CauseEpisode:
    start: datetime
    end: datetime


@dataclass(frozen=True)
class Cause:
    spec_index: int
    tests: tuple[int, ...]
    episodes: tuple[CauseEpisode, ...]
    episode_rate: float  # chance the cause strikes a build during an episode
    background_rate: float  # chance it strikes outside episodes
    hit_rate: float  # chance each of its tests that ran is hit when it strikes
    retry_hit_rate: float  # chance a rerun in the same build is hit again


@dataclass
class Faults:
    flaky: list[Flaky]
    regressions: list[Regression]
    causes: list[Cause]
    always_skipped: list[int]
    flaky_rate: np.ndarray  # per test
    skipped_mask: np.ndarray
    cause_member: list[np.ndarray]  # bool per test, per cause
    growth_start: datetime
    growth_end: datetime


def plant_faults(
    params: ScenarioParams,
    rnd: random.Random,
    rng: np.random.Generator,
    cat: Catalogue,
    tl: Timeline,
) -> Faults:
    """Choose flaky tests, regressions, failure causes and always-skipped tests."""
    n = len(cat.tests)
    taken = np.zeros(n, dtype=bool)

    # always skipped: about 1 % of each component, at least one test each
    skipped = sorted(
        int(x)
        for tests in cat.component_tests
        for x in rng.choice(tests, max(1, round(len(tests) * 0.01)), replace=False)
    )
    taken[skipped] = True

    # flaky: about 5 %, rates skewed low
    free = np.flatnonzero(~taken)
    n_flaky = max(4, round(n * 0.05))
    flaky_idx = sorted(int(x) for x in rng.choice(free, n_flaky, replace=False))
    flaky = []
    rates = np.zeros(n)
    for t in flaky_idx:
        rate = round(float(min(0.45, 0.02 + rng.beta(1.2, 6.0) * 0.6)), 3)
        kind = FLAKY_KINDS[int(rng.integers(len(FLAKY_KINDS)))]
        if COMPONENTS[cat.tests[t].component].name == "Mobile App" and kind == "ordering":
            kind = "timing"
        flaky.append(Flaky(t, rate, kind))
        rates[t] = rate
    taken[flaky_idx] = True

    # regressions: merged branches introduce them, a later merge of the owning component fixes them
    regressions: list[Regression] = []
    merged = [b for b in tl.branches if b.merged_main is not None]
    n_reg = max(3, round(params.n_days / 12 * max(1.0, n / 600)))
    reg_no = 0
    attempts = 0
    while len(regressions) < n_reg and attempts < 50 * n_reg and merged:
        attempts += 1
        intro = merged[rnd.randrange(len(merged))]
        assert intro.merged_main is not None
        if intro.merged_main < 2 or any(r.intro_branch is intro for r in regressions):
            continue
        # most regressions land in another component than the branch touched (so PR checks miss them)
        comp = intro.component if rnd.random() < 0.25 else rnd.randrange(len(COMPONENTS))
        pool = [int(t) for t in cat.component_tests[comp] if not taken[t]]
        if len(pool) < 3:
            continue
        k = rnd.choice((1, 1, 2, 3))
        chosen = tuple(sorted(rnd.sample(pool, k)))
        intro_time = tl.main_commit_time[intro.merged_main]
        fixers = [
            b
            for b in merged
            if b.component == comp
            and b.base_main >= intro.merged_main
            and b.merged_main is not None
            and (tl.main_commit_time[b.merged_main] - intro_time).days >= 2
        ]
        fix_branch = None
        if fixers and rnd.random() < 0.85:
            fixers.sort(key=lambda b: b.merged_main or 0)
            fix_branch = fixers[min(len(fixers) - 1, int(rnd.expovariate(1 / 3)))]
        reg_no += 1
        taken[list(chosen)] = True
        regressions.append(
            Regression(
                id=f"regression-{reg_no:02d}",
                tests=chosen,
                intro_main=intro.merged_main,
                intro_branch=intro,
                fix_main=None if fix_branch is None else fix_branch.merged_main,
                fix_branch=fix_branch,
                values=REGRESSION_VALUES[rnd.randrange(len(REGRESSION_VALUES))],
                template=rnd.randrange(2),
            )
        )
    # broken from the start: one never fixed, one fixed by a later merge of its component
    n_broken = max(2, round(n / 300))
    for b in range(n_broken):
        pool = [int(t) for t in range(n) if not taken[t]]
        t = pool[rnd.randrange(len(pool))]
        comp = cat.tests[t].component
        fix_branch = None
        if b % 2 == 1:
            fixers = [x for x in merged if x.component == comp]
            if fixers:
                fix_branch = fixers[len(fixers) // 2]
        taken[t] = True
        regressions.append(
            Regression(
                id=f"broken-{b + 1:02d}",
                tests=(t,),
                intro_main=-1,
                intro_branch=None,
                fix_main=None if fix_branch is None else fix_branch.merged_main,
                fix_branch=fix_branch,
                values=REGRESSION_VALUES[rnd.randrange(len(REGRESSION_VALUES))],
                template=rnd.randrange(2),
            )
        )

    # failure causes: each hits several tests of its components, mostly in short episodes
    start = datetime.combine(params.start_date, datetime.min.time(), tzinfo=UTC)
    causes = []
    members = []
    per_cause = max(4, round(n * 0.012))
    for si, spec in enumerate(CAUSES):
        pool = np.concatenate([cat.component_tests[COMPONENT_INDEX[c]] for c in spec.components])
        pool = pool[~taken[pool] | (rates[pool] > 0)]
        chosen_arr = np.sort(rng.choice(pool, min(per_cause, len(pool)), replace=False))
        episodes = []
        for _ in range(rnd.randint(2, 4)):
            day = rnd.uniform(0, params.n_days - 1)
            length = rnd.uniform(0.5, 4.0)
            episodes.append(
                CauseEpisode(
                    start + timedelta(days=day),
                    start + timedelta(days=min(day + length, params.n_days)),
                )
            )
        episodes.sort(key=lambda e: e.start)
        causes.append(
            Cause(
                si,
                tuple(int(x) for x in chosen_arr),
                tuple(episodes),
                episode_rate=round(rnd.uniform(0.5, 0.9), 2),
                background_rate=round(rnd.uniform(0.005, 0.02), 3),
                hit_rate=round(rnd.uniform(0.6, 0.95), 2),
                retry_hit_rate=round(rnd.uniform(0.3, 0.7), 2),
            )
        )
        mask = np.zeros(n, dtype=bool)
        mask[chosen_arr] = True
        members.append(mask)

    skipped_mask = np.zeros(n, dtype=bool)
    skipped_mask[skipped] = True
    end = datetime.combine(params.end_date, datetime.max.time(), tzinfo=UTC)
    return Faults(flaky, regressions, causes, skipped, rates, skipped_mask, members, start, end)


def growth_factor(when: datetime, faults: Faults) -> float:
    """Slow-down of the growing component's tests: 1.0 at the start, 3.0 at the end."""
    span = (faults.growth_end - faults.growth_start).total_seconds()
    t = min(1.0, max(0.0, (when - faults.growth_start).total_seconds() / span))
    return 1.0 + 2.0 * t**1.5


GROWTH_FORMULA = "1 + 2 * (t / T) ** 1.5, t = time since the first day, T = length of the history"
