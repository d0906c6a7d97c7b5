"""Input and output at the edges: the ffmpeg process, probing, decoding, seeking, encoding, the
motion-log files and atomic publishing. Nothing outside this package knows a process or a pipe."""
