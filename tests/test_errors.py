"""One message, two spellings: Python callers read decimal=',', command-line users --decimal ,."""

import pickle

from pathfinder.errors import InputError, setting


def test_each_reader_sees_their_own_spelling():
    error = InputError("read the file with " + setting("decimal=','", "--decimal ,") + " and try again")
    assert str(error) == error.message == "read the file with decimal=',' and try again"
    assert error.for_command_line() == "read the file with --decimal , and try again"


def test_a_message_is_always_one_line_and_plain_messages_are_the_same_for_both():
    error = InputError("first part\n   second part")
    assert error.message == "first part second part" == error.for_command_line()


def test_a_setting_without_a_command_line_form_disappears_there():
    error = InputError("too many classes" + setting(", or raise max_levels", ""))
    assert error.message.endswith("raise max_levels") and error.for_command_line() == "too many classes"


def test_an_error_sent_back_from_a_worker_process_keeps_its_message():
    error = pickle.loads(pickle.dumps(InputError("x " + setting("a=1", "--a 1"))))
    assert error.message == "x a=1"
