"""Key bindings of the prompt."""

from __future__ import annotations

from prompt_toolkit.key_binding import KeyBindings


def bindings() -> KeyBindings:
    """Ctrl-C at the prompt clears the line and stays at the prompt. (Ctrl-D on an
    empty line leaves, as prompt_toolkit does by itself; Ctrl-C while a command
    runs is a KeyboardInterrupt that the dispatcher turns into a cancel.)"""
    kb = KeyBindings()

    @kb.add("c-c")
    def _clear(event) -> None:
        buf = event.app.current_buffer
        buf.cancel_completion()
        buf.reset()

    return kb
