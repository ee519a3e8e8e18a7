"""The safety caution carried by the README, every summary and every report."""

__all__ = ["CAUTION"]

CAUTION = (
    "Preliminary layout aid only. fallway models a point mass with a constant friction "
    "coefficient; real friction varies with material, moisture, temperature and wear. "
    "Chutes, conveyors, cable lines and their supports can hurt people: have every design "
    "checked and approved by a qualified engineer under local codes and licensed practice."
)
