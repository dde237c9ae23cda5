"""The safety caution every live command shows before it starts."""

__all__ = ["CAUTION"]

CAUTION = (
    "Caution: force testing stores energy. Stay within the cell's rated capacity, keep hands "
    "clear of pinch points, guard against parts that may fly, and follow your laboratory's "
    "procedures and local codes; forcelens does not replace accredited calibration."
)
