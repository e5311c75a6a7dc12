"""Safety cautions for falling-ball work, shown in every report and reused by the README.

The list follows the cautions practitioners give for this experiment (glycerol, oils, tall glass
tubes, steel balls and retrieval magnets); see ``user-needs.md`` §5 of the project notes.
"""

from __future__ import annotations

__all__ = ["SAFETY_CAUTIONS"]

SAFETY_CAUTIONS: tuple[str, ...] = (
    "Wear eye protection: glycerol and oils irritate the eyes, and a splash is most likely when a "
    "ball is dropped in or retrieved.",
    "Stand the tube upright on a firm, level surface, clamped or in a stand, with a stopper in the "
    "top; use a plastic tube where you can, and check glass tubes for cracks before filling.",
    "Put a cushion (a rubber stopper or pad) at the bottom of the tube before dropping heavy balls.",
    "Keep glycerol containers closed: glycerol takes up water from the air, which also changes its "
    "viscosity.",
    "Never use used engine oil: it contains substances that can cause cancer.",
    "Wear nitrile gloves when handling oils, and wash your hands afterwards.",
    "Wipe up spills at once: glycerol, oil and syrup make floors slippery.",
    "Count the balls and magnets before and after, pick up dropped balls at once, and keep both "
    "away from small children: swallowed magnets or a magnet and a steel ball can cause serious "
    "internal injury.",
    "Keep strong magnets away from pacemakers and other implants, and mind your fingers: they snap "
    "together hard.",
    "Never eat or drink syrups, honey or other liquids used in the lab.",
    "Follow your local rules and the advice of your lab's safety officer; they take precedence over "
    "this list.",
)
