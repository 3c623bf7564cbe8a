"""Invented names for the second collection, on top of the boats and crew the demo families use."""

from __future__ import annotations

VISITORS = ["Marigold", "Stormpetrel", "Halcyon Day", "Brackenfoot", "Lantern Moth", "Quillon", "Tidewrack",
            "Sorrel Bay", "Peewit", "Corrigan's Luck", "Windlestraw", "Oyster Grey"]
MOORINGS = ["Gull Buoy", "Net Loft Steps", "Fuel Pontoon", "Lifeboat Slip", "Ice House Quay", "Kelp Beacon",
            "Old Crane", "Pilot Steps", "Tar Shed Pontoon", "Eel Rock Buoy", "Weighbridge Steps", "Bell Perch"]
PORTS = ["Skerrow", "Hollin Voe", "Port Amery", "Vessa", "Caddon Sound", "Lanmouth", "Brisk Harbour", "Orlestad"]
SPECIES = ["mackerel", "pollack", "crab", "whiting", "dab", "ling", "gurnard", "lobster"]
PLACES = ["harbour mouth", "inner basin", "fuel berth", "east pier head", "old lifeboat slip", "north wall",
          "kelp bank", "outer mooring trot"]
