"""The disclosure report: one self-contained HTML page a non-engineer can read, print and file.

`build_report` verifies the package (redact.provenance.verify.verify_package), then reads what it can of it
and lays out: the verification result (prominent, at the top, with every finding when it
failed), the cautions, what was processed, the disclosure record, the model and settings, a
timeline of people / keypoint confidence / luma with the review ranges shaded, the review ranges
with thumbnails taken ONLY from the redacted video, failed frames, the transform log and the
signed files. Everything is inline (CSS, SVG, JPEG data URIs): the page makes no network request.
Every string taken from the package is untrusted and passes through html.escape.
"""

from __future__ import annotations

import html
import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np

from redact import __version__, jsonio
from redact.errors import InputError, PackageError, VerificationFailed
from redact.formats import quality_jsonl, review_json
from redact.formats.review_json import in_words
from redact.provenance.contents import PackageContents, UnverifiedPackage, VerifiedPackage
from redact.provenance.log import DISCLOSURE_FIELDS, decode_entry, utc_now
from redact.provenance.package import ENVELOPE, LOG, QUALITY, REVIEW, SKELETONS, open_package, read_statement_unverified
from redact.provenance.predicate import SourceRecord
from redact.ranges import format_ranges
from redact.report.plots import Timeline, data_uri, redacted_frames, thumbnail_jpeg, timeline_svg

#: Most review ranges that get a thumbnail (keeps the page printable; common practice).
MAX_THUMBNAILS = 60
#: Most quality rows read (about 18 hours at 30 fps); beyond that the timeline is cut (common practice).
MAX_QUALITY_ROWS = 2_000_000
#: Most log entries shown in the table (common practice).
MAX_LOG_ROWS = 500


CAUTIONS = (
    ("Skeleton data is pseudonymised, not anonymous.",
     "Body proportions and the way a person walks can identify them, so the skeleton package is "
     "still personal data (GDPR Article 4(5) and Recital 26). Handle it as personal data."),
    ("Automated redaction misses people.",
     "People in poor light, far away, partly hidden or entering the picture can be missed. A person "
     "must look at every range flagged below AND watch the whole redacted video before anything "
     "is disclosed. The flags say where to look first; they are not a clearance."),
    ("The law and your data-protection officer decide.",
     "Whether this material may be shared, with whom and for what purpose is decided under local "
     "data-protection law by the organisation's data-protection officer, not by this tool."),
)
REFERENCES = (
    "EDPB Guidelines 3/2019 on processing of personal data through video devices, version 2.0 (2020): "
    "access requests may be met by masking or scrambling other people.",
    "UK ICO guidance on video surveillance, “Governance (post-deployment)”: other people may be obscured "
    "by blurring, masking or solid fill; record the date of disclosure, the recipient, their organisation "
    "and the purpose.",
    "GDPR (Regulation (EU) 2016/679) Article 4(5) and Recital 26: pseudonymised data remain personal data.",
)


@dataclass(frozen=True)
class DisclosureReport:
    """The report page (UTF-8 HTML bytes) and what it says about verification."""

    html: bytes
    verified: bool
    key_id: str | None
    findings: tuple[str, ...]
    thumbnails: int


def esc(value: Any) -> str:
    """Any value as HTML-escaped text (quotes too): every package string goes through here."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return html.escape(f"{value:g}", quote=True)
    return html.escape(str(value), quote=True)


def _num(x: Any) -> float:
    return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) else math.nan


def _obj(d: Any, key: str) -> dict:
    v = d.get(key) if isinstance(d, dict) else None
    return v if isinstance(v, dict) else {}


def _list(d: dict, key: str) -> list:
    v = d.get(key)
    return v if isinstance(v, list) else []


def _seconds(x: Any) -> str:
    v = _num(x)
    return "—" if math.isnan(v) else f"{v:.2f} s"


def _flat(d: Any, prefix: str = "") -> list[tuple[str, Any]]:
    """Nested dicts → sorted (dotted key, value) pairs; lists stay values."""
    if not isinstance(d, dict):
        return [(prefix or "value", d)]
    out: list[tuple[str, Any]] = []
    for k in sorted(d, key=str):
        v = d[k]
        key = f"{prefix}.{k}" if prefix else str(k)
        out.extend(_flat(v, key) if isinstance(v, dict) and v else [(key, v)])
    return out


def _short(value: Any, limit: int = 300) -> str:
    text = value if isinstance(value, str) else jsonio.dumps(value).decode("utf-8", "replace")
    return text if len(text) <= limit else text[:limit] + " …"


# ----------------------------------------------------------------------------- reading


@dataclass(frozen=True)
class _Contents:
    """What could be read from the package (unverified unless the report says VALID)."""

    statement: dict
    log: list[dict]
    timeline: Timeline | None
    ranges: list[dict]
    rules: dict
    problems: list[str]


def _read_log(contents: PackageContents, problems: list[str]) -> list[dict]:
    entries: list[dict] = []
    if not contents.has(LOG):
        problems.append(f"{LOG} is missing")
        return entries
    try:
        for n, line in contents.lines(LOG):
            try:
                what = f"{LOG} line {n}"
                entries.append(decode_entry(line, what) if contents.verified else jsonio.loads_object(line, what))
            except PackageError as e:
                problems.append(str(e))
    except (PackageError, VerificationFailed) as e:
        problems.append(str(e))
    return entries


def _read_quality(contents: PackageContents, problems: list[str]) -> Timeline | None:
    if not contents.has(QUALITY):
        problems.append(f"{QUALITY} is missing: no timeline")
        return None
    cols: dict[str, list] = {k: [] for k in ("t", "people", "observed", "mean_conf", "luma_mean", "fault")}
    try:
        for n, line in contents.lines(QUALITY, quality_jsonl.LINE_LIMIT):
            if n > MAX_QUALITY_ROWS:
                problems.append(f"{QUALITY}: more than {MAX_QUALITY_ROWS} rows; the timeline is cut there")
                break
            what = f"{QUALITY} line {n}"
            if contents.verified:  # the one strict decoder of the format
                row = asdict(quality_jsonl.decode_quality_line(line, what))
            else:  # a package that failed verification: shown as far as it reads, every value escaped
                row = jsonio.loads_object(line, what)
            for k in ("t", "people", "observed", "mean_conf", "luma_mean"):
                cols[k].append(_num(row.get(k)))
            cols["fault"].append(row.get("fault") is True)
    except (PackageError, VerificationFailed) as e:
        problems.append(f"{e} (the timeline shows the rows before it)")
    if not cols["t"]:
        return None
    a = {k: np.asarray(v, dtype=bool if k == "fault" else np.float64) for k, v in cols.items()}
    t = a["t"]
    if not np.isfinite(t).all():  # a row without a time: fall back to row numbers
        t = np.arange(t.shape[0], dtype=np.float64)
        problems.append(f"{QUALITY}: some rows have no time; the timeline uses row numbers")
    return Timeline(t, a["people"], a["observed"], a["mean_conf"], a["luma_mean"], a["fault"])


def _read_review(contents: PackageContents, problems: list[str]) -> tuple[list[dict], dict]:
    if not contents.has(REVIEW):
        problems.append(f"{REVIEW} is missing: no review ranges")
        return [], {}
    try:
        data = contents.read_bytes(REVIEW, review_json.LIMIT)
        if contents.verified:  # the one strict decoder of the format
            doc = review_json.decode_review(data)
            ranges = [{"start": r.frame_start, "end": r.frame_end, "t_start": r.t_start, "t_end": r.t_end,
                       "reasons": list(r.reasons)} for r in doc.ranges]
            return ranges, dict(doc.rules)
        raw = jsonio.loads(data, REVIEW, review_json.LIMIT)
    except (PackageError, VerificationFailed) as e:
        problems.append(str(e))
        return [], {}
    # A package that failed verification: shown as far as it reads (either layout of review.json,
    # version 2 or 1), every value escaped.
    items = raw.get("ranges") if isinstance(raw, dict) else None
    ranges = []
    for r in items if isinstance(items, list) else []:
        if not isinstance(r, dict):
            continue
        reasons = _list(r, "reasons")
        frames = r["frames"] if isinstance(r.get("frames"), list) and len(r["frames"]) == 2 else \
            [r.get("frame_start"), r.get("frame_end")]
        seconds = r["seconds"] if isinstance(r.get("seconds"), list) and len(r["seconds"]) == 2 else \
            [r.get("t_start"), r.get("t_end")]
        ranges.append({"start": frames[0], "end": frames[1], "t_start": seconds[0], "t_end": seconds[1],
                       "reasons": [str(x) for x in reasons]})
    return ranges, _obj(raw, "rules")


def _read(package: Path, verified: VerifiedPackage | None) -> _Contents:
    """Everything the report shows from the package: through the verified package when verification
    passed (each file re-checked against its signed hash), else read unverified for display (a
    statement that cannot be parsed is a problem listed, and the other files are still shown)."""
    problems: list[str] = []
    statement: dict = {}
    contents: PackageContents | None = verified
    try:
        with open_package(package) as reader:
            problems.extend(reader.problems)
            if contents is None:
                try:
                    stmt, hint = read_statement_unverified(reader)
                except PackageError as e:
                    problems.append(str(e))
                    stmt, hint = None, None
                contents = UnverifiedPackage(package, stmt, hint, frozenset(reader.files))  # type: ignore[arg-type]
    except (PackageError, OSError) as e:
        problems.append(f"the package cannot be read: {e}")
        return _Contents(statement, [], None, [], {}, problems)
    if contents.statement is not None:
        statement = contents.statement.to_json()
    log = _read_log(contents, problems)
    timeline = _read_quality(contents, problems)
    ranges, rules = _read_review(contents, problems)
    return _Contents(statement, log, timeline, ranges, rules, problems)


# ----------------------------------------------------------------------------- thumbnails


def _video_is_the_signed_copy(video: Path, statement: dict, verified: bool) -> str | None:
    """None when thumbnails may be taken from `video`, else why not (shown in the report).

    When the package verified with --video, the verifier has matched the video to the signed
    redacted-video subject. Otherwise the video must still match the subject the (unverified)
    statement names, and must not be the source: this stops a mistaken `--video ORIGINAL` from
    putting unredacted people into the report."""
    from redact.hashing import sha256_file

    digest, _ = sha256_file(video)
    src = _obj(_obj(statement, "predicate"), "source")
    if digest == src.get("sha256"):
        return "the file given as --video is the ORIGINAL source, not the redacted copy"
    if verified:
        return None
    subjects = _list(statement, "subject")
    for s in subjects:
        if isinstance(s, dict) and _obj(s, "annotations").get("role") == "redacted-video" \
                and _obj(s, "digest").get("sha256") == digest:
            return None
    return "the file given as --video does not match the redacted video named in the package"


def _thumbnails(video: Path, ranges: list[dict]) -> dict[int, tuple[str, int, int, int]]:
    """Range number → (data URI, width, height, frame) of the middle frame of each range."""
    middles: dict[int, int] = {}
    for k, r in enumerate(ranges[:MAX_THUMBNAILS]):
        a, b = r["start"], r["end"]
        if isinstance(a, int) and isinstance(b, int) and 0 <= a <= b:
            middles[k] = (a + b) // 2
    frames = redacted_frames(video, set(middles.values()))
    out = {}
    for k, i in middles.items():
        if i in frames:
            jpeg, w, h = thumbnail_jpeg(frames[i])
            out[k] = (data_uri(jpeg), w, h, i)
    return out


# ----------------------------------------------------------------------------- page


CSS = """
:root { color-scheme: light; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       margin: 0 auto; max-width: 62rem; padding: 1.5rem; color: #1a1a1a; background: #fff; line-height: 1.45; }
h1 { font-size: 1.6rem; margin: 0 0 .2rem; }
h2 { font-size: 1.2rem; margin: 0 0 .6rem; padding-bottom: .2rem; border-bottom: 2px solid #c8c8c8; }
section { margin: 1.6rem 0; }
.sub { color: #555; margin: 0 0 1rem; }
.status { border: 3px solid; border-radius: 6px; padding: .8rem 1rem; margin: 1rem 0; }
.status.ok { border-color: #2e7d32; background: #f1f8f1; }
.status.bad { border-color: #b00020; background: #fff1f2; }
.status .big { font-size: 1.35rem; font-weight: 700; margin: 0 0 .3rem; }
.status.ok .big { color: #1b5e20; } .status.bad .big { color: #b00020; }
.status.open { border-color: #c77700; background: #fff8ec; } .status.open .big { color: #7a4a00; }
.caution { border-left: 5px solid #c77700; background: #fff8ec; padding: .6rem 1rem; margin: .6rem 0; }
.caution b { display: block; }
table { border-collapse: collapse; width: 100%; font-size: .92rem; }
th, td { border: 1px solid #c8c8c8; padding: .3rem .45rem; text-align: left; vertical-align: top; }
th { background: #f3f3f3; font-weight: 600; }
table.kv th { width: 32%; }
td.mono, span.mono { font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace;
                     font-size: .85rem; overflow-wrap: anywhere; word-break: break-all; }
td.name, span.name { font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace;
                     font-size: .85rem; overflow-wrap: normal; word-break: normal; }
.plot { width: 100%; height: auto; display: block; }
figure { margin: 0; }
figcaption { color: #444; font-size: .9rem; margin-top: .3rem; }
.thumb { width: 100%; max-width: 320px; height: auto; display: block; border: 1px solid #999; }
.note { color: #444; font-size: .92rem; }
.nw { white-space: nowrap; }
td.time { white-space: nowrap; font-size: .8rem; }
.warn { color: #b00020; font-weight: 600; }
ul.findings li { margin: .15rem 0; }
tr { page-break-inside: avoid; break-inside: avoid; }
footer { margin-top: 2rem; color: #555; font-size: .85rem; border-top: 1px solid #c8c8c8; padding-top: .5rem; }
@media print {
  @page { margin: 15mm; }
  body { max-width: none; padding: 0; font-size: 10.5pt; background: #fff !important; color: #000; }
  section { margin: 0 0 5mm; }
  h2 { break-after: avoid; page-break-after: avoid; }
  .status, .caution, th { background: none !important; }
  .status.bad { border-width: 4px; }
  img, svg, figure, .status, .caution, tr { break-inside: avoid; page-break-inside: avoid; }
  .thumb { max-width: 60mm; }
  thead { display: table-header-group; }
  a { color: #000; text-decoration: none; }
}
"""


def _kv(rows: Sequence[tuple[str, Any]], mono: Sequence[str] = ()) -> str:
    out = ['<table class="kv"><tbody>']
    for k, v in rows:
        cls = ' class="mono"' if k in mono else ""
        out.append(f"<tr><th>{esc(k)}</th><td{cls}>{esc(v)}</td></tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _status_section(verified: bool, key_id: str | None, checked: Sequence[str], findings: Sequence[str],
                    video: Path | None, source: Path | None) -> str:
    if verified:
        extra = []
        if source is None:
            extra.append("The original source file was not checked (it was not given).")
        if video is None:
            extra.append("The redacted video was not checked (it was not given).")
        return (f'<div class="status ok" id="verification"><p class="big">Signature and contents: VALID</p>'
                f'<p>Signed by key <span class="mono">{esc(key_id)}</span>. Checked: {esc(", ".join(checked))}.</p>'
                + "".join(f'<p class="note">{esc(x)}</p>' for x in extra)
                + '<p class="note">A valid signature proves who made this package and that it is unchanged; '
                  "it does not prove that disclosing it is lawful or that every person was obscured.</p></div>")
    items = "".join(f"<li>{esc(f)}</li>" for f in findings) or "<li>verification failed</li>"
    return ('<div class="status bad" id="verification"><p class="big">VERIFICATION FAILED — do not rely on '
            "this record</p><p>The package does not match its signature or could not be checked completely. "
            "Everything below is read from an UNVERIFIED package and may have been altered.</p>"
            f'<p><b>{len(findings)} finding(s):</b></p><ul class="findings">{items}</ul></div>')


def _partial_source_section(pred: dict, verified: bool) -> str:
    """At the top, for a package of a partly decoded source: what it does not cover."""
    src = _obj(pred, "source")
    if not src.get("stopped_early"):
        return ""
    try:
        text = SourceRecord.parse(src).partial_warning()
    except PackageError:  # an unverified, malformed statement: say it in general words
        text = f"PARTIAL SOURCE: decoding stopped before the end of the file ({src.get('stopped_early')})."
    note = "" if verified else " (read from a package that FAILED verification)"
    return (f'<div class="status bad" id="partial-source"><p class="big">PARTIAL SOURCE — this record does not '
            f"cover the whole video{esc(note)}</p><p>{esc(text)}</p></div>")


def _human_review_section(pred: dict) -> str:
    """The review status, for the top of the page: who checked how many ranges, corrections, coverage."""
    from redact.review.state import summary_line

    rec = _obj(pred, "human_review")
    if not rec:
        return ('<div class="status open" id="human-review"><p class="big">Review: not reviewed</p><p>No person has '
                "recorded a review of this copy (<code>redact review</code>). Check every flagged range and watch "
                "the whole redacted video before anything is disclosed.</p></div>")
    ok = rec.get("ranges_checked") == rec.get("ranges_total") and rec.get("whole_video_watched") is True
    return (f'<div class="status {"ok" if ok else "open"}" id="human-review"><p class="big">Review: '
            f"{esc(summary_line(rec))}</p><p>Reviewed at {esc(rec.get('reviewed_at'))} (UTC); frames shown on "
            f"screen: {esc(rec.get('frames_watched'))} of {esc(rec.get('frames'))}.</p></div>")


def _source_section(pred: dict) -> str:
    src = _obj(pred, "source")
    size = _num(src.get("bytes"))
    rows = [
        ("File name", src.get("name")),
        ("SHA-256 of the file", src.get("sha256")),
        ("Size", f"{int(size):,} bytes" if not math.isnan(size) else src.get("bytes")),
        ("Duration", _seconds(src.get("duration"))),
        ("Frames", src.get("frames")),
        ("Frame rate (frames per second)", src.get("fps")),
        ("Picture size (pixels)", f"{src.get('width')} × {src.get('height')}"),
        ("Root hash over every frame (RFC 6962)", src.get("frames_root")),
        ("Decoding stopped early", src.get("stopped_early") or "no"),
    ]
    return ('<section class="first" id="source"><h2>What was processed</h2>'
            + _kv(rows, mono=("SHA-256 of the file", "Root hash over every frame (RFC 6962)")) + "</section>")


def _disclosure_section(pred: dict, log: list[dict]) -> str:
    entries = [e for e in log if e.get("kind") == "disclosure"]
    signed = _obj(pred, "disclosure")
    out = ['<section id="disclosure"><h2>Disclosure record</h2>']
    if not entries and not signed:
        out.append('<p class="warn">No disclosure was recorded in this package.</p><p class="note">Record the '
                   "date of disclosure, the recipient, their organisation and the purpose (UK ICO guidance) "
                   "when the material is processed (options --recipient, --organisation, --purpose, "
                   "--request-ref, --disclosure-date).</p>")
    for e in entries or ([signed] if signed else []):
        rows = [(f.replace("_", " ").capitalize(), e.get(f)) for f in DISCLOSURE_FIELDS]
        if e is not signed:
            rows.append(("Recorded in the log at (UTC)", e.get("time")))
        out.append(_kv(rows))
    if entries and signed:
        last = {f: entries[-1].get(f) for f in DISCLOSURE_FIELDS if entries[-1].get(f) is not None}
        if last != signed:
            out.append('<p class="warn">The disclosure fields in the log and in the signed statement differ.</p>')
    out.append("</section>")
    return "".join(out)


def _settings_section(pred: dict, rules: dict) -> str:
    model, params = _obj(pred, "model"), _obj(pred, "parameters")
    render, pose = _obj(params, "render"), _obj(params, "pose")
    tool = _obj(pred, "tool")
    privacy = _obj(pred, "privacy")
    plain = [
        ("Model", model.get("id")), ("Model SHA-256", model.get("sha256")), ("Model licence", model.get("licence")),
        ("How people are obscured", render.get("style")),
        ("Extra margin around each person (fraction of the box)", _obj(render, "regions").get("base_margin")),
        ("People kept obscured after detection is lost (seconds)", params.get("coast_seconds")),
        ("Frames before a first detection also obscured (seconds)", params.get("lookback_seconds")),
        ("Minimum person score of the detector", pose.get("score_threshold")),
        ("Model input size (pixels, long side)", pose.get("input_long_side")),
        ("Audio included", params.get("include_audio")),
        ("Skeleton de-identification options", "none" if privacy.get("options") == "none" else "see below"),
        ("Tool", f"{tool.get('name', '?')} {tool.get('version', '?')}"),
        ("Package created (UTC)", pred.get("created")),
    ]
    full = _flat(params, "parameters") + ([] if rules == _obj(params, "review") else _flat(rules, "review rules")) \
        + ([] if privacy.get("options") == "none" else _flat(privacy, "privacy"))
    rows = "".join(f'<tr><td class="mono">{esc(k)}</td><td class="mono">{esc(_short(v))}</td></tr>' for k, v in full)
    return ('<section id="settings"><h2>How it was processed</h2>' + _kv(plain, mono=("Model SHA-256",))
            + '<p class="note">Every setting as signed:</p><table><thead><tr><th>setting</th><th>value</th>'
            f"</tr></thead><tbody>{rows}</tbody></table></section>")


def _timeline_section(contents: _Contents) -> str:
    tl = contents.timeline
    if tl is None or len(tl) == 0:
        return ('<section id="timeline"><h2>Timeline</h2>'
                '<p class="warn">No per-frame quality data could be read.</p></section>')
    spans = []
    for r in contents.ranges:
        a, b = _num(r.get("t_start")), _num(r.get("t_end"))
        if not (math.isnan(a) or math.isnan(b)):
            spans.append((a, b))
    conf = _num(contents.rules.get("low_confidence"))
    dark = _num(contents.rules.get("dark"))
    svg = timeline_svg(tl, spans, None if math.isnan(conf) else conf, None if math.isnan(dark) else dark)
    return ('<section id="timeline"><h2>Timeline</h2><figure>' + svg +
            "<figcaption>Top: people per frame. Middle: how sure the detector was of the body points of the "
            "people it found (mean keypoint confidence, 0–1). Bottom: brightness of the picture (mean luma, "
            "ITU-R BT.601). Shaded: time ranges flagged for review. Red lines: frames that failed and were "
            "fully obscured.</figcaption></figure></section>")


def _review_section(contents: _Contents, thumbs: dict, thumb_note: str) -> str:
    out = ['<section id="review"><h2>Ranges to review before disclosure</h2>',
           f'<p>{len(contents.ranges)} range(s) flagged. Look at each of them in the redacted video, then watch '
           "the whole video: people can be missed outside these ranges too.</p>",
           f'<p class="note">{esc(thumb_note)}</p>']
    if contents.ranges:
        out.append("<table><thead><tr><th>#</th><th>frames</th><th>time</th><th>why flagged</th>"
                   "<th>middle frame of the redacted video</th></tr></thead><tbody>")
        for k, r in enumerate(contents.ranges):
            why = "; ".join(in_words(r["reasons"])) or "—"
            if k in thumbs:
                uri, w, h, i = thumbs[k]
                cell = (f'<img class="thumb" src="{uri}" width="{w}" height="{h}" '
                        f'alt="redacted frame {i}"><div class="note">frame {i}</div>')
            else:
                cell = '<span class="note">no thumbnail</span>'
            out.append(f'<tr class="range"><td>{k + 1}</td><td class="nw">{esc(r["start"])}–{esc(r["end"])}</td>'
                       f'<td class="nw">{_seconds(r["t_start"])} – {_seconds(r["t_end"])}</td><td>{esc(why)}</td>'
                       f"<td>{cell}</td></tr>")
        out.append("</tbody></table>")
    out.append("</section>")
    return "".join(out)


def _spans(frames: list[int]) -> str:
    """Sorted frame numbers → "3, 7–9, 12" (inclusive ranges)."""
    return format_ranges(frames, dash="–")


def _fault_section(contents: _Contents) -> str:
    faults = [e for e in contents.log if e.get("kind") == "fault"]
    frames: list[int] = []
    if contents.timeline is not None:
        frames = np.flatnonzero(contents.timeline.fault).tolist()
    out = ['<section id="faults"><h2>Frames that failed</h2>']
    if not frames and not faults:
        out.append("<p>No frame failed during processing.</p>")
    else:
        spans = _spans(frames)
        out.append(f"<p>{len(frames)} frame(s) could not be processed and were written FULLY obscured "
                   f"(nothing of them is shown): frames {esc(spans) if spans else '—'}.</p>")
        for e in faults:
            out.append(_kv([("Recorded frames", _short(e.get("frames"))), ("Count", e.get("count")),
                            ("Reasons", _short(e.get("reasons"))), ("Action", e.get("action"))]))
    out.append("</section>")
    return "".join(out)


def _log_section(log: list[dict]) -> str:
    out = ['<section id="log"><h2>Transform log</h2><p class="note">Every step, in order. Each entry carries the '
           "SHA-256 of the one before it, so removing or editing an entry is detected by verification.</p>"
           "<table><thead><tr><th>#</th><th>time (UTC)</th><th>step</th><th>details</th></tr></thead><tbody>"]
    for e in log[:MAX_LOG_ROWS]:
        details = "; ".join(f"{k}: {_short(v, 160)}" for k, v in e.items() if k not in ("seq", "prev", "time", "kind"))
        out.append(f'<tr><td>{esc(e.get("seq"))}</td><td class="time">{esc(e.get("time"))}</td>'
                   f'<td>{esc(e.get("kind"))}</td><td class="mono">{esc(details)}</td></tr>')
    out.append("</tbody></table>")
    if len(log) > MAX_LOG_ROWS:
        out.append(f'<p class="note">{len(log) - MAX_LOG_ROWS} further entries are not shown.</p>')
    out.append("</section>")
    return "".join(out)


def name_html(value: Any) -> str:
    """A file or folder name, escaped, that wraps only after a separator (/ . _ -), never inside a word."""
    text = esc(value)
    for sep in ("/", ".", "_", "-"):
        text = text.replace(sep, sep + "<wbr>")
    return text


def _files_section(statement: dict) -> str:
    subjects = _list(statement, "subject")
    rows = "".join(f'<tr><td class="name">{name_html(s.get("name"))}</td>'
                   f'<td>{esc(_obj(s, "annotations").get("role"))}</td>'
                   f'<td>{esc(_obj(s, "annotations").get("bytes"))}</td>'
                   f'<td class="mono">{esc(_obj(s, "digest").get("sha256"))}</td></tr>'
                   for s in subjects if isinstance(s, dict))
    return ('<section id="files"><h2>Signed files</h2><table><thead><tr><th>file</th><th>role</th><th>bytes</th>'
            f"<th>SHA-256</th></tr></thead><tbody>{rows}</tbody></table></section>")


def _cautions_section() -> str:
    items = "".join(f'<div class="caution"><b>{esc(t)}</b>{esc(body)}</div>' for t, body in CAUTIONS)
    return f'<section class="cautions" id="cautions"><h2>Before anything is disclosed</h2>{items}</section>'


def _references_section() -> str:
    items = "".join(f"<li>{esc(r)}</li>" for r in REFERENCES)
    return f'<section id="references"><h2>References</h2><ul>{items}</ul></section>'


def _package_label(package: Path) -> str:
    """How the header names the package: its folder and name ("lobby-out/package"), since a bare
    "package" says nothing (and read "from package package")."""
    p = Path(package).absolute()
    return f"{p.parent.name}/{p.name}" if p.parent.name else p.name


def _check_is_package(package: Path) -> None:
    """InputError when `package` holds none of a package's own files (a wrong folder, not a damaged
    package: a damaged one still gets a report that says what is wrong with it)."""
    try:
        with open_package(package) as reader:
            if not {ENVELOPE, SKELETONS, LOG} & set(reader.files):
                raise InputError(f"{package}: not a package (it holds none of {ENVELOPE}, {SKELETONS}, {LOG}); "
                                 "nothing was written")
    except PackageError as e:
        raise InputError(f"{package}: not a readable package ({e}); nothing was written") from None


def make_report(package: Path, trusted_keys: list, video: Path | None = None,
                source: Path | None = None) -> DisclosureReport:
    """Verify `package` with `trusted_keys` (and the --source / --video files when given) and
    build the report page; a failed verification is reported in the page, never raised.

    InputError for a package path that does not exist or an empty key list (usage errors).
    """
    from redact.provenance.verify import verify_package

    package = Path(package)
    if not package.is_dir() and not package.is_file():
        raise InputError(f"{package}: no such package (expected a directory or a .tar file)")
    if not trusted_keys:
        raise InputError("no trusted public key given; pass at least one --trusted-key NAME.public.pem")
    _check_is_package(package)
    result: VerifiedPackage | None = None
    findings: tuple[str, ...]
    try:
        result = verify_package(package, trusted_keys, source=source, video=video)
        verified, key_id, checked, findings = True, result.key_id, result.checked, ()
    except VerificationFailed as e:
        verified, key_id, checked, findings = False, None, (), tuple(e.findings)
    contents = _read(package, result)
    pred = _obj(contents.statement, "predicate")

    thumbs: dict = {}
    if video is None:
        thumb_note = "No redacted video was given (--video), so no pictures are shown."
    else:
        why_not = _video_is_the_signed_copy(Path(video), contents.statement, verified)
        if why_not:
            thumb_note = f"No pictures are shown: {why_not}."
        else:
            thumbs = _thumbnails(Path(video), contents.ranges)
            thumb_note = ("Pictures are the middle frame of each range, taken from the REDACTED video only"
                          + ("" if verified else " (the package failed verification)") + ".")
            if len(contents.ranges) > MAX_THUMBNAILS:
                thumb_note += f" Only the first {MAX_THUMBNAILS} ranges have a picture."

    src = _obj(pred, "source")
    title = f"Disclosure record: {src.get('name') or package.name}"
    problems = "".join(f"<li>{esc(p)}</li>" for p in contents.problems)
    body = [
        f"<header><h1>{esc(title)}</h1><p class=\"sub\">Report generated {esc(utc_now())} by redact "
        f"{esc(__version__)} from the package <span class=\"name\">{name_html(_package_label(package))}</span>."
        "</p></header>",
        _human_review_section(pred),
        _status_section(verified, key_id, checked, findings, video, source),
        _partial_source_section(pred, verified),
        (f'<div class="status bad"><p><b>Parts of the package could not be read:</b></p><ul>{problems}</ul></div>'
         if problems else ""),
        _cautions_section(),
        _source_section(pred),
        _disclosure_section(pred, contents.log),
        _settings_section(pred, contents.rules or _obj(_obj(pred, "parameters"), "review")),
        _timeline_section(contents),
        _review_section(contents, thumbs, thumb_note),
        _fault_section(contents),
        _log_section(contents.log),
        _files_section(contents.statement),
        _references_section(),
        "<footer>Skeleton data is pseudonymised, not anonymous. A person must review the flagged ranges and the "
        "whole redacted video before disclosure; local data-protection law and the data-protection officer "
        "decide what may be shared.</footer>",
    ]
    page = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
            "img-src data:; style-src 'unsafe-inline'\">"
            f"<title>{esc(title)}</title><style>{CSS}</style></head><body>\n"
            + "\n".join(b for b in body if b) + "\n</body></html>\n")
    return DisclosureReport(page.encode("utf-8"), verified, key_id, findings, len(thumbs))


def build_report(package: Path, trusted_keys: list, video: Path | None = None, source: Path | None = None) -> bytes:
    """The report page as UTF-8 HTML bytes; see make_report."""
    return make_report(package, trusted_keys, video, source).html
