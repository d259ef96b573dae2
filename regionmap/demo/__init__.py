"""The invented demo scenario: terrain, zones and weather."""
