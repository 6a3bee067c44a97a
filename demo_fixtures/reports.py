"""Run the planted faults against each build and write its JUnit-XML report as text.

Reports are built as strings (no element tree), so millions of results stay fast. Three dialects:

* pytest ``--junitxml`` (family xunit2): ``<testsuites name="pytest tests">`` around one
  ``<testsuite name="pytest">``; a rerun is a repeated ``testcase`` element.
* Ant style: one ``testsuite`` per package holding one nested ``testsuite`` per class; no reruns.
* Surefire: a bare ``<testsuite>`` root; reruns as ``flakyFailure``/``flakyError`` (passed later) or
  ``rerunFailure``/``rerunError`` (failed every time) with ``stackTrace`` children, in the order of the
  Surefire 3.0 report schema.

A build running several components writes one ``<testsuites>`` file with a section per component, in that
component's dialect, and totals on the root. Every header counts testcase elements (the pytest and Surefire
convention).
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from datetime import datetime, timedelta
from xml.sax.saxutils import escape, quoteattr

import numpy as np

from demo_fixtures.scenario import (
    COMPONENTS,
    GROWING_COMPONENT,
    Build,
    Catalogue,
    Faults,
    growth_factor,
)
from demo_fixtures.texts import (
    CAUSES,
    FLAKY_TEMPLATES,
    REGRESSION_TEMPLATES,
    SKIP_REASONS,
    Filler,
    MessageTemplate,
    TestContext,
    junit3_style,
    jvm_tail,
)

PASS, FAILURE, ERROR, SKIPPED = "pass", "failure", "error", "skipped"


@dataclass(frozen=True, slots=True)
class Attempt:
    outcome: str  # FAILURE, ERROR or SKIPPED
    type: str
    message: str
    text: str
    seconds: float


@dataclass
class BuildOutcome:
    """What happened to each test a build ran: component -> rows (test, seconds, final, failed attempts)."""

    sections: list[tuple[int, list[tuple[int, float, str, list[Attempt]]]]]


@dataclass
class Tally:
    """Counts over everything written."""

    testcase_elements: int = 0
    attempts: int = 0
    failed_attempts: int = 0


class ReportWriter:
    """Simulate and render builds; holds the per-test strings that every report reuses."""

    def __init__(
        self,
        *,
        catalogue: Catalogue,
        faults: Faults,
        rnd: random.Random,
        rng: np.random.Generator,
        rerun_from: datetime,
    ) -> None:
        self.cat = catalogue
        self.faults = faults
        self.rnd = rnd
        self.rng = rng
        self.rerun_from = rerun_from
        self.tally = Tally()
        self._ctx = [
            TestContext(t.classname, t.name, COMPONENTS[t.component].language) for t in catalogue.tests
        ]
        self._open = []
        for t in catalogue.tests:
            dialect = COMPONENTS[t.component].dialect
            if dialect == "surefire":
                self._open.append(f'<testcase name="{t.name}" classname="{t.classname}" time="')
            else:
                self._open.append(f'<testcase classname="{t.classname}" name="{t.name}" time="')
        self._growing = np.array([COMPONENTS[t.component].name == GROWING_COMPONENT for t in catalogue.tests])
        self._templates: dict[tuple[int, str], tuple[str, str, str]] = {}
        self._regressed_by_test = {t: r for r in faults.regressions for t in r.tests}
        self._skip_reason = {
            t: SKIP_REASONS["pytest" if self._ctx[t].language == "py" else "jvm"][t % 3]
            for t in faults.always_skipped
        }

    # -- simulation ---------------------------------------------------------------------------------------------

    def _reruns(self, build: Build, dialect: str) -> int:
        if dialect == "surefire" and build.started >= self.rerun_from:
            return 2
        if dialect == "pytest" and build.job == "nightly-full":
            return 1
        return 0

    def _message(
        self,
        tpl: MessageTemplate,
        t: int,
        build: Build,
        extra: dict[str, str] | None = None,
    ) -> Attempt:
        ctx = self._ctx[t]
        dialect = COMPONENTS[self.cat.tests[t].component].dialect
        if dialect == "ant":
            tpl = junit3_style(tpl)
        filler = Filler(self.rnd, ctx, build.started)
        if extra:
            filler.update(extra)
        message = tpl.message.format_map(filler)
        if ctx.language == "jvm":
            body = tpl.body.replace("{tail}", jvm_tail(dialect)).format_map(filler)
            text = f"{tpl.type}: {message}\n{body}"
        else:
            text = tpl.body.format_map(filler)
        return Attempt(tpl.outcome, tpl.type, message, text, 0.0)

    def simulate(self, build: Build) -> BuildOutcome:
        cat, faults, rng, rnd = self.cat, self.faults, self.rng, self.rnd
        parts = []
        for comp in build.components:
            if build.class_subset is not None:
                mine = [j for j in build.class_subset if cat.classes[j][0] == comp]
                parts.append(np.concatenate([cat.class_tests[j] for j in mine]))
            else:
                parts.append(cat.component_tests[comp])
        ran = np.concatenate(parts)
        n = len(ran)
        seconds = cat.base_seconds[ran] * rng.lognormal(0.0, 0.2, n)
        grow = self._growing[ran]
        if grow.any():
            seconds[grow] *= growth_factor(build.started, faults)
        flaky_fail = rng.random(n) < faults.flaky_rate[ran]
        special = flaky_fail | faults.skipped_mask[ran]
        cause_hit = np.full(n, -1)
        for ci, cause in enumerate(faults.causes):
            member = faults.cause_member[ci][ran]
            if not member.any():
                continue
            in_episode = any(ep.start <= build.started < ep.end for ep in cause.episodes)
            if rnd.random() >= (cause.episode_rate if in_episode else cause.background_rate):
                continue
            hits = member & (rng.random(n) < cause.hit_rate) & (cause_hit < 0)
            cause_hit[hits] = ci
            special |= hits
        active = {t for r in faults.regressions if r.active(build) for t in r.tests}
        if active:
            special |= np.isin(ran, np.fromiter(active, dtype=np.int64))

        finals = {}
        for pos in np.flatnonzero(special):
            t = int(ran[pos])
            dialect = COMPONENTS[cat.tests[t].component].dialect
            finals[pos] = self._special(
                build, t, dialect, float(seconds[pos]), int(cause_hit[pos]), t in active
            )
        sections = []
        offset = 0
        for comp, part in zip(build.components, parts, strict=True):
            rows = []
            for k in range(len(part)):
                pos = offset + k
                if pos in finals:
                    rows.append(finals[pos])
                else:
                    rows.append((int(ran[pos]), float(seconds[pos]), PASS, []))
            offset += len(part)
            sections.append((comp, rows))
        return BuildOutcome(sections)

    def _special(
        self,
        build: Build,
        t: int,
        dialect: str,
        secs: float,
        cause_index: int,
        regressed: bool,
    ) -> tuple[int, float, str, list[Attempt]]:
        faults, rnd = self.faults, self.rnd
        ctx = self._ctx[t]
        if faults.skipped_mask[t]:
            reason = self._skip_reason[t]
            if dialect == "pytest":
                text = f"/builds/berthwise/{ctx.module_path}:{ctx.line('skip')}: {reason}"
            else:
                text = ""
            return (
                t,
                0.0,
                SKIPPED,
                [
                    Attempt(
                        SKIPPED,
                        "pytest.skip" if dialect == "pytest" else "",
                        reason,
                        text,
                        0.0,
                    )
                ],
            )
        reruns = self._reruns(build, dialect)
        rate = faults.flaky_rate[t]
        attempts: list[Attempt] = []
        for k in range(reruns + 1):
            attempt_secs = secs * (1.0 if k == 0 else rnd.uniform(0.8, 1.3))
            if regressed:
                reg = self._regressed_by_test[t]
                tpl = REGRESSION_TEMPLATES[ctx.language][reg.template]
                want, got, field = reg.values
                getter = "get" + "".join(w.capitalize() for w in field.split("_"))
                a = self._message(
                    tpl,
                    t,
                    build,
                    {"want": want, "got": got, "field": field, "getter": getter},
                )
            elif cause_index >= 0 and (k == 0 or rnd.random() < faults.causes[cause_index].retry_hit_rate):
                spec = CAUSES[faults.causes[cause_index].spec_index]
                a = self._message(spec.templates[ctx.language], t, build)
                if spec.timeout_seconds:
                    attempt_secs = spec.timeout_seconds + rnd.uniform(0.01, 0.4)
            elif rate > 0 and (k == 0 and cause_index < 0 or k > 0 and rnd.random() < rate):
                kind = next(f.kind for f in faults.flaky if f.test == t)
                a = self._message(FLAKY_TEMPLATES[kind][ctx.language], t, build)
                if kind == "timing":
                    attempt_secs = 5.0 + rnd.uniform(0.001, 0.2)
            else:
                return (t, attempt_secs, PASS, attempts)
            attempts.append(Attempt(a.outcome, a.type, a.message, a.text, round(attempt_secs, 3)))
        return (t, attempts[-1].seconds, attempts[0].outcome, attempts)

    # -- rendering -----------------------------------------------------------------------------------------------

    def render(self, build: Build, outcome: BuildOutcome, hostname: str) -> str:
        sections = outcome.sections
        when = build.started
        bodies = []
        totals = [0, 0, 0, 0, 0.0]  # tests, failures, errors, skipped, time
        for comp, rows in sections:
            dialect = COMPONENTS[comp].dialect
            if dialect == "pytest":
                text, counts = self._pytest(comp, rows, when, hostname)
            elif dialect == "ant":
                text, counts = self._ant(comp, rows, when, hostname)
            else:
                text, counts = self._surefire(comp, rows, when)
            bodies.append(text)
            for i in range(5):
                totals[i] += counts[i]
            when += timedelta(seconds=counts[4] + 5)
        if len(sections) == 1:
            dialect = COMPONENTS[sections[0][0]].dialect
            if dialect == "surefire":
                return '<?xml version="1.0" encoding="UTF-8"?>\n' + bodies[0]
            if dialect == "pytest":
                return (
                    '<?xml version="1.0" encoding="utf-8"?><testsuites name="pytest tests">'
                    + bodies[0]
                    + "</testsuites>\n"
                )
            return '<?xml version="1.0" encoding="UTF-8"?>\n<testsuites>\n' + bodies[0] + "</testsuites>\n"
        head = (
            f'<?xml version="1.0" encoding="UTF-8"?>\n<testsuites name="{build.job}" tests="{totals[0]}" '
            f'failures="{totals[1]}" errors="{totals[2]}" skipped="{totals[3]}" time="{totals[4]:.3f}">\n'
        )
        return head + "".join(bodies) + "</testsuites>\n"

    def _count(
        self,
        rows: list[tuple[int, float, str, list[Attempt]]],
        per_attempt_elements: bool,
    ) -> list:
        """Header numbers: per testcase element (pytest writes one element per attempt)."""
        tests = failures = errors = skipped = 0
        secs = 0.0
        tally = self.tally
        for _t, s, final, attempts in rows:
            if per_attempt_elements and attempts and final != SKIPPED:
                for a in attempts:
                    tests += 1
                    failures += a.outcome == FAILURE
                    errors += a.outcome == ERROR
                    secs += a.seconds
                if final == PASS:
                    tests += 1
                    secs += s
            else:
                tests += 1
                failures += final == FAILURE
                errors += final == ERROR
                skipped += final == SKIPPED
                secs += s
            n_attempts = len(attempts) + (final == PASS) if final != SKIPPED else 1
            tally.attempts += n_attempts
            tally.failed_attempts += sum(a.outcome in (FAILURE, ERROR) for a in attempts)
        tally.testcase_elements += tests
        return [tests, failures, errors, skipped, secs]

    def _pytest(self, comp, rows, when, hostname):
        counts = self._count(rows, True)
        stamp = when.strftime("%Y-%m-%dT%H:%M:%S.%f")
        head = (
            f'<testsuite name="pytest" errors="{counts[2]}" failures="{counts[1]}" skipped="{counts[3]}" '
            f'tests="{counts[0]}" time="{counts[4]:.3f}" timestamp="{stamp}+00:00" hostname="{hostname}">'
        )
        out = [head]
        opens = self._open
        for t, s, final, attempts in rows:
            if not attempts:
                out.append(f'{opens[t]}{s:.3f}" />')
                continue
            if final == SKIPPED:
                a = attempts[0]
                out.append(
                    f'{opens[t]}0.000"><skipped type="pytest.skip" message={quoteattr(a.message)}>'
                    f"{escape(a.text)}</skipped></testcase>"
                )
                continue
            for a in attempts:
                tag = "failure" if a.outcome == FAILURE else "error"
                out.append(
                    f'{opens[t]}{a.seconds:.3f}"><{tag} message={quoteattr(a.message)}>{escape(a.text)}</{tag}>'
                    "</testcase>"
                )
            if final == PASS:
                out.append(f'{opens[t]}{s:.3f}" />')
        out.append("</testsuite>")
        return "".join(out), counts

    def _ant(self, comp, rows, when, hostname):
        by_class: dict[int, list] = {}
        for row in rows:
            by_class.setdefault(self.cat.tests[row[0]].class_index, []).append(row)
        by_pkg: dict[str, list[int]] = {}
        for j in by_class:
            by_pkg.setdefault(self.cat.classes[j][1], []).append(j)
        out = []
        totals = [0, 0, 0, 0, 0.0]
        stamp = when.strftime("%Y-%m-%dT%H:%M:%S")
        opens = self._open
        for pkg in sorted(by_pkg):
            inner = []
            pkg_counts = [0, 0, 0, 0, 0.0]
            for j in by_pkg[pkg]:
                crow = by_class[j]
                counts = self._count(crow, False)
                for i in range(5):
                    pkg_counts[i] += counts[i]
                head = (
                    f'  <testsuite name="{self.cat.classes[j][2]}" package="{pkg}" tests="{counts[0]}" '
                    f'failures="{counts[1]}" errors="{counts[2]}" skipped="{counts[3]}" time="{counts[4]:.3f}" '
                    f'timestamp="{stamp}" hostname="{hostname}">'
                )
                lines = [head]
                for t, s, final, attempts in crow:
                    if not attempts:
                        lines.append(f'    {opens[t]}{s:.3f}"/>')
                    elif final == SKIPPED:
                        lines.append(
                            f'    {opens[t]}0.000"><skipped message={quoteattr(attempts[0].message)}/></testcase>'
                        )
                    else:
                        a = attempts[0]
                        tag = "failure" if a.outcome == FAILURE else "error"
                        lines.append(
                            f'    {opens[t]}{a.seconds:.3f}"><{tag} message={quoteattr(a.message)} '
                            f"type={quoteattr(a.type)}>{escape(a.text)}</{tag}></testcase>"
                        )
                lines.append("  </testsuite>")
                inner.append("\n".join(lines))
            out.append(
                f'<testsuite name="{pkg}" tests="{pkg_counts[0]}" failures="{pkg_counts[1]}" '
                f'errors="{pkg_counts[2]}" skipped="{pkg_counts[3]}" time="{pkg_counts[4]:.3f}" '
                f'timestamp="{stamp}" hostname="{hostname}">\n' + "\n".join(inner) + "\n</testsuite>\n"
            )
            for i in range(5):
                totals[i] += pkg_counts[i]
        return "".join(out), totals

    def _surefire(self, comp, rows, when):
        counts = self._count(rows, False)
        head = (
            f'<testsuite version="3.0" name="{COMPONENTS[comp].package}" time="{counts[4]:.3f}" '
            f'tests="{counts[0]}" errors="{counts[2]}" skipped="{counts[3]}" failures="{counts[1]}">'
        )
        out = [head]
        opens = self._open
        for t, s, final, attempts in rows:
            if not attempts:
                out.append(f'  {opens[t]}{s:.3f}"/>')
                continue
            if final == SKIPPED:
                out.append(f'  {opens[t]}0"><skipped message={quoteattr(attempts[0].message)}/></testcase>')
                continue
            parts = [f'  {opens[t]}{s:.3f}">']
            if final == PASS:
                # flakyFailure* before flakyError* (schema order); all of them failed runs before the pass
                for want, tag in ((FAILURE, "flakyFailure"), (ERROR, "flakyError")):
                    parts.extend(_rerun_element(tag, a) for a in attempts if a.outcome == want)
            else:
                first, rest = attempts[0], attempts[1:]
                rerun_f = [_rerun_element("rerunFailure", a) for a in rest if a.outcome == FAILURE]
                rerun_e = [_rerun_element("rerunError", a) for a in rest if a.outcome == ERROR]
                main = (
                    f"\n    <{first.outcome} message={quoteattr(first.message)} type={quoteattr(first.type)}>"
                    f"{escape(first.text)}</{first.outcome}>"
                )
                if first.outcome == FAILURE:
                    parts.extend([main, *rerun_f, *rerun_e])
                else:
                    parts.extend([*rerun_f, main, *rerun_e])
            parts.append("\n  </testcase>")
            out.append("".join(parts))
        out.append("</testsuite>\n")
        return "\n".join(out), counts


def _rerun_element(tag: str, a: Attempt) -> str:
    return (
        f"\n    <{tag} message={quoteattr(a.message)} type={quoteattr(a.type)}>\n"
        f"      <stackTrace>{escape(a.text)}</stackTrace>\n    </{tag}>"
    )
