"""MP4 (H.264) writing through imageio-ffmpeg, atomically.

ffmpeg runs as a child process fed raw RGB frames through a pipe, so encoding
overlaps with rendering on the other core. The file appears under its name only
once it is complete (written to a hidden temporary name, then renamed).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from bench.fileio import unlink_quietly

#: x264 speed/size trade-off; "veryfast" keeps encoding well ahead of a software renderer.
X264_PRESET = "veryfast"
#: x264 constant rate factor (lower is better quality; 23 is x264's own default).
X264_CRF = 23


class Mp4Writer:
    def __init__(self, path: str | Path, width: int, height: int, fps: float,
                 preset: str = X264_PRESET, crf: int = X264_CRF):
        import imageio_ffmpeg

        if width % 2 or height % 2:
            raise ValueError(f"H.264 with yuv420p needs an even width and height, got {width}x{height}")
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._tmp = self.path.with_name(f".{self.path.stem}.partial{self.path.suffix}")
        self.size = (int(width), int(height))
        self.frames = 0
        self._gen = imageio_ffmpeg.write_frames(
            str(self._tmp), self.size, fps=float(fps), codec="libx264", pix_fmt_in="rgb24",
            pix_fmt_out="yuv420p", quality=None, macro_block_size=1, ffmpeg_log_level="error",
            output_params=["-preset", preset, "-crf", str(int(crf)), "-movflags", "+faststart"],
        )
        self._gen.send(None)

    def write(self, frame) -> None:
        """``frame``: an (height, width, 3) uint8 array or a PIL image of the writer's size."""
        if hasattr(frame, "tobytes") and not isinstance(frame, np.ndarray):
            data = frame.tobytes()
        else:
            data = np.ascontiguousarray(frame, dtype=np.uint8).tobytes()
        self._gen.send(data)
        self.frames += 1

    def close(self) -> Path:
        self._gen.close()
        os.replace(self._tmp, self.path)
        return self.path

    def abort(self) -> None:
        try:
            self._gen.close()
        except Exception:  # noqa: BLE001
            pass
        unlink_quietly(self._tmp)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.close()
        else:
            self.abort()
