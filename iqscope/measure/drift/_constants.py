"""Defaults and thresholds shared by the drift modules (line choice, blocks, capture, figures)."""

from __future__ import annotations



#: Sentence closing each note: with a stable reference line ...
NOTE_RELATIVE = " Relative to the stable reference line (the receiver's own drift removed)."
#: ... and without one.
NOTE_INCLUDES_RECEIVER = " Includes the receiver's own oscillator drift (no --reference line)."
#: Default window for the worst excursion, s (a beacon transmission is ~2 minutes).
DEFAULT_WINDOW_S = 120.0
#: Default half-width of the settling band, Hz (widened to 5 sigma of one block if needed).
DEFAULT_SETTLE_BAND_HZ = 1.0
#: Per-block 1-sigma the automatic block length aims at, Hz.
TARGET_SIGMA_HZ = 0.02
#: Post-integration SNR (N * SNR, linear) a block must reach to follow the line reliably.
MIN_BLOCK_SNR = 60.0
#: Shortest automatic block, s (shorter blocks only when the recording is under 8 of these):
#: drift needs no finer time resolution, and fewer blocks cost less per hour of recording
#: (the per-block cost is mostly fixed once each line has its own decimated channel).
MIN_AUTO_BLOCK_S = 1.0
#: A line to follow must stand this far above the median PSD of its surroundings
#: (+/-25 bins of the survey spectrum): voice harmonics and noise-modulation bumps do not.
LINE_CONTRAST_DB = 10.0
#: Fewest blocks a track must have to give figures.
MIN_BLOCKS = 8
#: Shortest block the tracker accepts, samples (the shortest block choose_block_s picks).
MIN_BLOCK_SAMPLES = 64
#: Candidate block lengths, s (octaves, so ADEV taus are round numbers).
_BLOCK_CHOICES = tuple(2.0**k for k in range(-7, 4))  # 1/128 s .. 8 s
#: ADEV is quoted at the octave tau nearest this, s.
ADEV_QUOTE_TAU_S = 10.0
#: Lowest rate of a band captured during the pipeline's pass, Hz: at least 8 channel
#: half-widths (H = 110 Hz for the default span) so the tracker's own channel decimates.
CAPTURE_RATE_HZ = 1600.0
#: At most this many lines get a captured band, strongest first.
CAPTURE_LINES = 4
#: Memory for captured bands, bytes (complex64 at CAPTURE_RATE_HZ: 46 MB per line-hour).
CAPTURE_BYTES = 96 << 20
