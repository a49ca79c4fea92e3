"""Shared click options of the commands that run the pipeline (process, demo, batch) and of `tracks`, as decorators."""

from __future__ import annotations

import functools
from datetime import date

import click

from redact.pipeline import ProcessSettings
from redact.redaction.quality import ReviewRules
from redact.redaction.regions import RegionSettings
from redact.redaction.render import STYLES, RenderSettings
from redact.vision.crops import CropSettings
from redact.vision.light import LightSettings
from redact.vision.models import DEFAULT_POSE_MODEL
from redact.vision.motion import MotionSettings
from redact.vision.pose import PoseSettings
from redact.vision.scene import SceneSettings
from redact.vision.search import SearchSettings
from redact.vision.track import TrackerConfig


class BundledModelChoice(click.Choice):
    """A click.Choice of the bundled models for one task, read from their manifests when first
    needed (help, completion or a value to check), never when the CLI is imported."""

    def __init__(self, task: str) -> None:
        self.task = task
        self.case_sensitive = True
        self._choices: tuple[str, ...] | None = None

    @property
    def choices(self) -> tuple[str, ...]:  # type: ignore[override]
        if self._choices is None:
            from redact.vision.models import list_models

            self._choices = tuple(m.id for m in list_models() if m.task == self.task)
        return self._choices



def _detection_options() -> list:
    """The options that decide who is found and which track id each person gets (with --threads,
    which only decides speed): shared by process, demo, batch and tracks."""
    return [
        click.option("--pose-model", type=BundledModelChoice("pose"), default=DEFAULT_POSE_MODEL, show_default=True,
                     help="Bundled pose model (`redact models` and models_manifest/ say what each is). "
                          "yolo11n-pose-int8 is yolo11n-pose quantised to int8: about 1.5-2x faster on the CPU, "
                          "keypoints a few pixels from the float32 model's; choose yolo11n-pose for the most "
                          "exact skeletons."),
        click.option("--input-size", type=click.IntRange(160, 1920), default=640, show_default=True,
                     help="Long side of the model input in pixels (a multiple of 32). Larger finds smaller "
                          "people, slower."),
        click.option("--score-threshold", type=click.FloatRange(0.01, 0.99), default=0.25, show_default=True,
                     help="Minimum person score of the detector. Lower finds more people and more false alarms."),
        click.option("--coast-seconds", type=click.FloatRange(0, 60), default=1.5, show_default=True,
                     help="How long a person whose detection is lost is still followed (and obscured) along "
                          "the predicted path."),
        click.option("--detect-every", type=click.IntRange(1, 10), default=1, show_default=True,
                     help="Run the detector on every k-th frame and track in between (faster; margins grow "
                          "on frames without detection)."),
        click.option("--threads", type=click.IntRange(1, 256), default=None,
                     help="CPU threads for the model, one frame at a time (default: as many frames at once as "
                          "cores, up to 4, one thread each; with --detect-every 2 or more, one frame on all "
                          "cores but one). The count is recorded: skeletons are byte-identical only with "
                          "the same count."),
        click.option("--smallest-person", type=click.IntRange(16, 400), default=40, show_default=True,
                     help="Height in pixels of the smallest person searched for: around people and movement "
                          "the model looks at windows enlarged so that people this small reach the size it "
                          "finds them at (smaller is slower; smaller people may be missed by the model, and are "
                          "covered only while they move)."),
        click.option("--motion-net/--no-motion-net", default=True, show_default=True,
                     help="Obscure anything that moves outside every tracked person's region and flag it for "
                          "review (background subtraction, no model; needs a fixed camera)."),
        click.option("--enhance-dim", is_flag=True,
                     help="Let the model look at a contrast-enhanced copy (CLAHE on luma) of frames darker than "
                          "the scene usually is; the redacted video is never brightened."),
    ]


def _with(fn, decorators: list):
    for d in reversed(decorators):
        fn = d(fn)
    return fn


def _detection(pose_model, input_size, score_threshold, coast_seconds, detect_every, threads, smallest_person,
               motion_net, enhance_dim) -> dict:
    """ProcessSettings fields from the detection options (click.BadParameter on a bad input size)."""
    if input_size % 32:
        raise click.BadParameter(f"must be a multiple of 32, got {input_size}", param_hint="--input-size")
    return {"pose": PoseSettings(model=pose_model, input_long_side=input_size, score_threshold=score_threshold),
            "tracker": TrackerConfig(), "coast_seconds": coast_seconds, "detect_every": detect_every,
            "threads": threads, "search": SearchSettings(windows=CropSettings(min_person_height=smallest_person)),
            "scene": SceneSettings(motion=MotionSettings(enabled=motion_net), light=LightSettings(enhance=enhance_dim))}


def track_options(fn):
    """Only the options that decide track ids (and --threads), for `redact tracks`, turned into one
    ProcessSettings passed as `settings` (everything else at its default: it does not matter there)."""

    @functools.wraps(fn)
    def wrapper(*args, pose_model, input_size, score_threshold, coast_seconds, detect_every, threads,
                smallest_person, motion_net, enhance_dim, **kwargs):
        kwargs["settings"] = ProcessSettings(**_detection(pose_model, input_size, score_threshold, coast_seconds,
                                                          detect_every, threads, smallest_person, motion_net,
                                                          enhance_dim))
        return fn(*args, **kwargs)

    return _with(wrapper, _detection_options())


def pipeline_options(fn):
    """Options that shape the redaction, turned into one ProcessSettings passed as `settings`."""

    @functools.wraps(fn)
    def wrapper(*args, style, figures, margin, pose_model, input_size, score_threshold, coast_seconds, detect_every,
                threads, smallest_person, motion_net, enhance_dim, crf, include_audio, archive, **kwargs):
        kwargs["settings"] = ProcessSettings(
            **_detection(pose_model, input_size, score_threshold, coast_seconds, detect_every, threads,
                         smallest_person, motion_net, enhance_dim),
            render=RenderSettings(style=style, figure=figures, regions=RegionSettings(base_margin=margin)),
            review=ReviewRules(), include_audio=include_audio, archive=archive, crf=crf,
        )
        return fn(*args, **kwargs)

    return _with(wrapper, [
        click.option("--style", type=click.Choice(STYLES), default="figure", show_default=True,
                     help="How people are obscured: figure = grey region with a stick figure drawn on it; "
                          "blur; pixelate; fill = plain grey; background = the empty scene behind people (a "
                          "median over the clip with people masked out, grey where never seen empty), with "
                          "figures."),
        click.option("--figures/--no-figures", default=False,
                     help="Also draw stick figures over blur, pixelate or fill."),
        click.option("--margin", type=click.FloatRange(0, 2), default=0.15, show_default=True,
                     help="Extra margin around each person, as a fraction of the box size."),
        *_detection_options(),
        click.option("--crf", type=click.IntRange(0, 51), default=20, show_default=True,
                     help="H.264 quality of the redacted video (lower is better)."),
        click.option("--include-audio", is_flag=True,
                     help="Carry the source's audio into the redacted video (dropped by default: voices "
                          "identify people)."),
        click.option("--archive", is_flag=True, help="Write the package as one .tar instead of a folder."),
    ])


def disclosure_options(fn):
    """Who receives the material and why: recorded in the transform log and the signed statement."""

    @click.option("--recipient", default=None, help="Person or body receiving the material (recorded).")
    @click.option("--organisation", default=None, help="The recipient's organisation (recorded).")
    @click.option("--purpose", default=None, help="Why it is disclosed (recorded).")
    @click.option("--request-ref", default=None, help="Reference of the request being answered (recorded).")
    @click.option("--disclosure-date", default=None,
                  help="Date of disclosure, YYYY-MM-DD (default: today when any disclosure field is given).")
    @functools.wraps(fn)
    def wrapper(*args, recipient, organisation, purpose, request_ref, disclosure_date, **kwargs):
        fields = {"recipient": recipient, "organisation": organisation, "purpose": purpose,
                  "request_reference": request_ref}
        if disclosure_date is not None:
            try:
                date.fromisoformat(disclosure_date)
            except ValueError:
                raise click.BadParameter(f"expected YYYY-MM-DD, got {disclosure_date!r}",
                                         param_hint="--disclosure-date") from None
        if any(v is not None for v in fields.values()) or disclosure_date is not None:
            fields["date"] = disclosure_date or date.today().isoformat()
            kwargs["disclosure"] = {k: v for k, v in fields.items() if v is not None}
        else:
            kwargs["disclosure"] = None
        return fn(*args, **kwargs)

    return wrapper
