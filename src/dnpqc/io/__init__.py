"""The edges where data enter and leave: scenario files, reports, OpenQASM 3, the point store and
atomic file writes."""
