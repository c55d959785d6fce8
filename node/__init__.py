"""veer.node: the planner node, ZeroMQ + msgpack, replanning while the robot drives.

A long-lived process takes the latest grid and robot pose over plain sockets, holds a
goal, and keeps a valid path published as the world changes (protocol:
docs/protocol.md; command: ``veer node``).

Modules, from the wire inwards:

- :mod:`~veer.node.codec`: the only module that knows msgpack; checks every message.
- :mod:`~veer.node.config`: NODE.toml, every key defaulted and checked; the exposure rule
  (no network address without CURVE) and the CURVE key files.
- :mod:`~veer.node.core`: state and replan policy, no sockets, time passed in
  (``NodeCore.on_input(kind, message, now_s) -> actions``), so a replay is deterministic.
- :mod:`~veer.node.jobs`: planning work as plain values; the only caller of the planner.
- :mod:`~veer.node.tracking`: where the robot is along its path.
- :mod:`~veer.node.worker`: the planning thread beside the socket loop.
- :mod:`~veer.node.server`: the socket loop, heartbeat and lifecycle; CURVE and the
  authenticator, limits (token bucket on control requests) and their events.
- :mod:`~veer.node.client`: client library for robots and test harnesses.
- :mod:`~veer.node.recording`: the recording log the server writes when NODE.toml says so.

Nothing is imported here, so ``import veer.node.codec`` does not pull in ZeroMQ.
"""
