"""Physics: Kerr QNM spectrum, spheroidal harmonics, ringdown waveforms, detectors.

Nothing here knows about data files, searches or campaigns.
"""
