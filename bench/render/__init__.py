"""Review media made from recorded results: videos, side-by-side videos and plots.

Reads only what a run wrote (``result.json``, ``trace.npz``) plus the scenario
file to rebuild the world; replays the recorded state exactly and never changes
a verdict. Modules: ``gl`` (OpenGL back ends), ``replay`` (recorded state ->
MuJoCo data), ``scene`` (offscreen frames and force arrows), ``overlays``
(Pillow text and marks), ``encode`` (H.264 MP4), ``video`` (one result ->
videos), ``compare`` (two results side by side), ``plots`` (matplotlib time
series), ``postrun`` (what ``bench run`` makes after its summary).
"""
