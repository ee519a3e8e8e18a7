"""The safety caution carried by the README, every summary and every report."""

__all__ = ["CABLE_CAUTION", "CAUTION"]

CAUTION = (
    "Preliminary layout aid only. fallway models a point mass with a constant friction "
    "coefficient; real friction varies with material, moisture, temperature and wear. "
    "Chutes, conveyors, cable lines and their supports can hurt people: have every design "
    "checked and approved by a qualified engineer under local codes and licensed practice."
)

#: What a cable line's outputs add to :data:`CAUTION`.
CABLE_CAUTION = (
    "Cable lines: the span model assumes a constant horizontal tension; the real tension, "
    "the anchors and the supports' foundations and guys must be designed for the peak rope "
    "force with the carrier anywhere on the line. The carrier arrives with the speed and "
    "energy the report gives and needs a brake or buffer at the discharge sized for them. "
    "Keep the loaded height where a stuck carrier or a person can be rescued from, and have "
    "the rope, saddles, carrier and brake checked by a qualified engineer under local codes."
)
