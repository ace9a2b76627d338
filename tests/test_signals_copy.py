"""host.signals.copy_feedback: the in-process session's copy of the loop's reused Feedback."""

import dataclasses

from host import signals as sig


def test_copy_feedback_copies_every_field_and_is_independent():
    fb = sig.Feedback()
    # a distinct, non-default value in every field, so a field the copy dropped shows
    for k, f in enumerate(dataclasses.fields(sig.Feedback)):
        setattr(fb, f.name, type(getattr(fb, f.name))(k + 7))
    c = sig.copy_feedback(fb)
    assert c == fb and c is not fb
    assert [getattr(c, f.name) for f in dataclasses.fields(c)] == [k + 7 for k in range(len(dataclasses.fields(c)))]
    fb.armature_current_A = -1.0  # the loop reuses its object: the copy must not follow
    fb.seq = 0
    assert c.armature_current_A != -1.0 and c.seq != 0
