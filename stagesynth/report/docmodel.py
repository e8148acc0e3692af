"""The report's document model: tables, figures and sections, shared by the section writers
and by both renderers (Markdown and HTML)."""

from __future__ import annotations

from dataclasses import dataclass, field

FIGURE_FILES = {"schematic": "schematic.svg", "bode": "bode.svg", "impedance": "impedance.svg",
                "histograms": "histograms.svg", "pulse": "pulse.svg", "noise": "noise.svg",
                "ripple": "ripple.svg",
                "distortion": "distortion.svg", "jfetbias": "jfetbias.svg"}


@dataclass(frozen=True)
class Table:
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[int, ...] = ()  # column indices set right-aligned
    status: int | None = None  # column holding "pass"/"FAIL"


@dataclass(frozen=True)
class Figure:
    name: str  # key of FIGURE_FILES
    alt: str  # short description (image alt text)
    caption: str


@dataclass(frozen=True)
class Section:
    title: str
    blocks: tuple = ()  # str (paragraph), list[str] (bullets), Table, Figure
    css_class: str = ""


@dataclass(frozen=True)
class Document:
    title: str
    subtitle: str
    status: str
    status_ok: bool | None  # None when there is nothing to judge against
    sections: tuple[Section, ...] = field(default_factory=tuple)

