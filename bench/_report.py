"""Rendering of benchmark results (the JSON dict written by kernels.py) as text and Markdown.

Times are shown in adaptive units (ns, us, ms, s) per call; ratios as "5.1x"; roofline
fractions as plain numbers (1.00 = streaming the coefficients at the measured read bandwidth).
"""

from __future__ import annotations

from _timing import UNSTEADY_SPREAD

COLUMNS = (
    "kernel",
    "impl",
    "median",
    "min",
    "reps",
    "ratio",
    "roofline",
    "rel.err",
    "target / note",
)


def fmt_time(seconds: float | None) -> str:
    """Seconds per call in a readable unit."""
    if seconds is None:
        return "-"
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("us", 1e-6)):
        if seconds >= scale:
            return f"{seconds / scale:.3g} {unit}"
    return f"{seconds / 1e-9:.3g} ns"


def fmt_bytes(nbytes: float) -> str:
    value = float(nbytes)
    for unit in ("B", "KiB", "MiB", "GiB"):
        if value < 1024 or unit == "GiB":
            return f"{value:.0f} {unit}" if unit == "B" else f"{value:.1f} {unit}"
        value /= 1024
    raise AssertionError("unreachable")


def fmt_rate(bytes_per_s: float | None) -> str:
    return "-" if bytes_per_s is None else f"{bytes_per_s / 1e9:.1f} GB/s"


def _num(value: float | None, spec: str, suffix: str = "") -> str:
    return "-" if value is None else f"{value:{spec}}{suffix}"


def target_text(target: dict | None) -> str:
    """E.g. '>= 5x PASS' (or 'info' when measured at other sizes than the target's)."""
    if not target:
        return ""
    unit = "x" if target["metric"] != "roofline" else ""
    return f">= {target['threshold']:g}{unit} {target['status']}"


def _impl_name(row: dict) -> str:
    """The row's implementation, with its variant: 'numpy:einsum'."""
    return row["impl"] + (f":{row['variant']}" if row.get("variant") else "")


def row_cells(row: dict) -> list[str]:
    """The table cells of one measured row."""
    impl = _impl_name(row)
    if row.get("best"):
        impl += " *"
    spread = row.get("block_spread")
    unsteady = f"UNSTEADY blocks {spread:.1f}x apart" if _is_unsteady(row) else ""
    parts = (target_text(row.get("target")), row.get("note", ""), unsteady)
    note = " ".join(s for s in parts if s)
    return [
        row["kernel"],
        impl,
        fmt_time(row["median_s"]),
        fmt_time(row["min_s"]),
        str(row["repeats"]),
        _num(row.get("ratio"), ".2f", "x"),
        _num(row.get("roofline"), ".2f"),
        _num(row.get("rel_err"), ".1e"),
        note,
    ]


def _is_unsteady(row: dict) -> bool:
    spread = row.get("block_spread")
    return spread is not None and spread > UNSTEADY_SPREAD


def _unsteady_lines(results: dict) -> list[str]:
    """One line per measured row whose block medians lie more than UNSTEADY_SPREAD apart."""
    lines = []
    for case in results.get("cases", []):
        for row in case.get("rows", []):
            if _is_unsteady(row):
                medians = ", ".join(fmt_time(t) for t in row["block_medians_s"])
                lines.append(f"{case['name']} {row['kernel']} {_impl_name(row)}: blocks {medians}")
    return lines


def _any_spread(results: dict) -> bool:
    """Whether any row had two blocks or more (a spread to check)."""
    rows = (r for c in results.get("cases", []) for r in c.get("rows", []))
    return any(r.get("block_spread") is not None for r in rows)


UNSTEADY_TITLE = f"unsteady timings (block medians more than {UNSTEADY_SPREAD}x apart)"


def unsteady_text(results: dict) -> str:
    """The rows measured partly in a slow phase of the host: their medians hold as long as
    fewer than half of their blocks were slow, but their ratios deserve a rerun."""
    lines = _unsteady_lines(results)
    if not lines and not _any_spread(results):
        return f"{UNSTEADY_TITLE}: not measured (one round per function, as in --quick)"
    if not lines:
        return f"{UNSTEADY_TITLE}: none"
    return "\n".join([f"== {UNSTEADY_TITLE} =="] + [f"  {line}" for line in lines])


def _aligned(rows: list[list[str]]) -> str:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = []
    for r in rows:
        last = len(r) - 1
        cells = [
            c.ljust(w) if i < 2 or i == last else c.rjust(w)
            for i, (c, w) in enumerate(zip(r, widths, strict=True))
        ]
        lines.append("  ".join(cells).rstrip())
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def case_header(case: dict) -> list[str]:
    """Title, parameters and what the ratio column means, as lines."""
    lines = [f"== {case['name']}: {case['title']} =="]
    if case.get("status") != "ok":
        lines.append(f"   {case.get('status', 'skipped').upper()}: {case.get('reason')}")
        return lines
    lines.append(f"   ratio = {case['ratio_meaning']}")
    others = case.get("other_processes_cores")
    if others is not None:
        lines.append(f"   other processes used {others:.2f} cores on average during this case")
    for name, bw in case.get("bandwidth", {}).items():
        probes = ", ".join(f"{k} {fmt_rate(v['median_Bps'])}" for k, v in bw["probes"].items())
        lines.append(
            f"   read bandwidth over {name} ({fmt_bytes(bw['probes']['sum']['bytes'])}): "
            f"{fmt_rate(bw['Bps'])} (best of {probes})"
        )
    lines += [f"   note: {note}" for note in case.get("notes", [])]
    return lines


def case_text(case: dict) -> str:
    """A case as a header plus an aligned text table."""
    lines = case_header(case)
    if case.get("status") == "ok" and case["rows"]:
        lines.append(_aligned([list(COLUMNS)] + [row_cells(r) for r in case["rows"]]))
    return "\n".join(lines)


def targets_text(targets: list[dict]) -> str:
    """One line per target: status, value against threshold, where it was measured."""
    if not targets:
        return "targets: none evaluated"
    lines = ["== targets (median-based) =="]
    for t in targets:
        unit = "" if t["metric"] == "roofline" else "x"
        value = "not measured" if t["value"] is None else f"{t['value']:.2f}{unit}"
        lines.append(
            f"  {t['status']:<5} {t['description']}: {value} (target >= {t['threshold']:g}{unit})"
        )
    return "\n".join(lines)


HOST_CHECK_TITLE = "host check (small dgemm rate per case / the run's best)"


def _host_check_lines(check: dict) -> list[str]:
    """The host probe's rate per case against the run's best, then one line per busy case."""
    fractions = check["fractions"]
    lines = [", ".join(f"{name} {f:.2f}" for name, f in fractions.items())]
    if check.get("single_case"):
        lines.append(
            "(one case ran the probe: its rate is its own best, so only the steadiness of its"
            " blocks is checked)"
        )
    unsteady = check.get("unsteady", {})
    for name in check.get("busy", []):
        how = (
            f"its blocks ran {unsteady[name]:.1f}x apart"
            if name in unsteady
            else f"it ran at {fractions[name]:.2f} of its best"
        )
        lines.append(
            f"BUSY  {name}: the host probe says other work ran ({how}); it slowed this case's"
            " arithmetic, so its ratios against memory-bound peers are likely understated"
        )
    return lines


def host_check_text(check: dict) -> str:
    """The host check for the terminal (see _host_check_lines)."""
    if not check.get("fractions"):
        return "host check: no case ran the host probe"
    lines = [f"== {HOST_CHECK_TITLE} =="] + [f"  {line}" for line in _host_check_lines(check)]
    return "\n".join(lines)


def meta_text(meta: dict) -> str:
    """Short description of the machine and settings."""
    cpu = meta["cpu"]
    v = meta["versions"]
    return (
        f"date {meta['date_utc']}  cpu {cpu.get('model')} ({cpu.get('usable_cpus')} usable)  "
        f"threads {meta['threads']}  kernel_path {meta['kernel_path']}\n"
        f"numpy {v['numpy']}  scipy {v['scipy']}  opt_einsum {v['opt_einsum']}  "
        f"torch {v['torch']}  load average at start {meta['load_average_start']}  "
        f"other processes' cores at start {_num(meta.get('other_processes_cores_start'), '.2f')}"
    )


def _md_heading(title: str) -> str:
    """A section title of the text report as a Markdown heading, first letter capitalized."""
    return f"### {title[0].upper()}{title[1:]}"


def _md_table(header: list[str], rows: list[list[str]]) -> list[str]:
    def esc(cell: str) -> str:
        return cell.replace("|", "\\|")

    out = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    out += ["| " + " | ".join(esc(c) for c in r) + " |" for r in rows]
    return out


def render_markdown(results: dict) -> str:
    """The whole result set as Markdown: settings, one table per case, the targets."""
    meta = results["meta"]
    lines = ["## Kernel benchmarks", "", meta_text(meta).replace("\n", "  \n"), ""]
    lines += [f"> {note}" for note in results.get("notes", [])]
    if results.get("notes"):
        lines.append("")
    targets = results.get("targets", [])
    if targets:
        lines += ["### Targets (median of repeats)", ""]
        rows = []
        for t in targets:
            unit = "" if t["metric"] == "roofline" else "x"
            value = "-" if t["value"] is None else f"{t['value']:.2f}{unit}"
            rows.append([t["description"], f">= {t['threshold']:g}{unit}", value, t["status"]])
        lines += _md_table(["target", "threshold", "measured", "status"], rows) + [""]
    if results.get("host_check", {}).get("fractions"):
        lines += [_md_heading(HOST_CHECK_TITLE), ""]
        lines += [line + "  " for line in _host_check_lines(results["host_check"])] + [""]
    unsteady = _unsteady_lines(results)
    if unsteady:
        lines += [_md_heading(UNSTEADY_TITLE), ""]
        lines += [line + "  " for line in unsteady] + [""]
    for case in results["cases"]:
        head = case_header(case)
        lines += [f"### {head[0].strip('= ')}", ""] + [h.strip() + "  " for h in head[1:]] + [""]
        if case.get("status") == "ok" and case["rows"]:
            lines += _md_table(list(COLUMNS), [row_cells(r) for r in case["rows"]]) + [""]
    return "\n".join(lines)
