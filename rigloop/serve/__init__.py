"""The live daemon and its clients. ``rigloop.serve.daemon`` is the public path
(``Daemon``, ``Settings``, ``serve``, ``read_state_file``, ``STORE_FILE``, ...); this
package imports nothing, so ``watch`` and ``client`` stay light.

  daemon       the lifecycle: start, the poll loop, stop, teardown, signals; wires the parts
  settings     the frozen ``Settings`` and their checks, from TOML
  rulebook     the served rule files by name and sha256, stored sessions' texts
  ports        ROUTER messages and serial lines in, replies out to where they came from
  service      one request in, its reply out: sessions, order checks, dedup, ``step``
  pipeline     batches, the committer thread, the batch in flight: no reply before its commit
  delivery     a committed batch's replies sent, its trials logged and published
  subjects     committed states, open sessions, snapshot marks
  observers    the XPUB publisher, for subscribed subjects only
  summary      what the watch table shows for one subject (no I/O)
  metrics      counters, latency window, timers for ``status()``
  curve_check  CURVE keys before any bind, and the self-test before serving
  client       the rig-side DEALER client (Lazy Pirate);  watch  the live observer table
"""
