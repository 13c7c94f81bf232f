"""What every operator of the extension shares: a failure becomes an error report and
``{'CANCELLED'}``, never a traceback; a core failure is worded by :func:`posing.error_text`
(display units, from the failure's structured reason)."""
from __future__ import annotations

from . import posing
from . import scene as sc


def errors():
    """Exceptions that become a report instead of a traceback."""
    try:
        return (sc.SceneError, sc.core().JointwiseError, OSError)
    except ImportError:
        return (sc.SceneError, OSError)


class Base:
    """Mixin of the extension's operators: ``run`` does the work; ``fail`` reports."""
    bl_options = {'REGISTER', 'UNDO'}

    def fail(self, message):
        self.report({'ERROR'}, message)
        return {'CANCELLED'}

    def done(self, message, scene=None):
        """Report ``message``; given ``scene``, show it on the status line too."""
        if scene is not None:
            scene.jointwise.message = message
        self.report({'INFO'}, message)
        return {'FINISHED'}

    def fail_on(self, context, head, exc):
        """Report ``exc`` (a scene, file or core failure) after ``head``, in the extension's
        words: :func:`posing.error_text`."""
        return self.fail(f"{head}: {posing.error_text(context.scene, exc)}")

    def execute(self, context):  # noqa: D401
        """Runs ``run``; an unexpected exception becomes a report, not a traceback."""
        try:
            return self.run(context)
        except Exception as exc:  # last resort: the user sees a message, the console the details
            import traceback
            traceback.print_exc()
            return self.fail(f"{self.bl_label}: unexpected problem ({type(exc).__name__}: {exc})")
