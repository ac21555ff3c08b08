"""Reading a form field back out of a page: a figure in its keypad field, its unit picked."""

from __future__ import annotations


def keeps(text: str, name: str, typed: str) -> None:
    """The field `name` shows `typed` again: the number in its keypad field, the unit picked
    beside it ("7.10 cm" -> 7.10 and cm)."""
    number, _, unit = typed.partition(" ")
    field_id = "f-" + name.replace(".", "-")
    assert f'id="{field_id}" name="{name}" type="text" value="{number}"' in text, name
    if unit:
        picker = text.split(f'id="{field_id}-unit"')[1].split("</select>")[0]
        assert f'value="{unit}" selected' in picker, (name, unit)
