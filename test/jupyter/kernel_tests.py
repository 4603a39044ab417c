"""jupyter_kernel_test's KernelTests against the hush kernel, with TypeScript samples.

Run from test/jupyter/jupyter.test.ts with JUPYTER_PATH pointing at a kernelspec installed by
installKernelspec({prefix}); HUSH_KERNEL_NAME names the kernelspec.
"""
import os
import unittest

import jupyter_kernel_test


class HushKernelTests(jupyter_kernel_test.KernelTests):
    kernel_name = os.environ.get("HUSH_KERNEL_NAME", "hush")

    language_name = "typescript"
    file_extension = ".ts"

    code_hello_world = 'console.log("hello, world")'
    code_stderr = 'console.error("to stderr")'

    completion_samples = [
        {"text": "Math.fl", "matches": {"floor"}},
        {"text": "const completionTarget = 1; completionTa", "matches": {"completionTarget"}},
    ]

    complete_code_samples = ["1", "let done = 1", "function f(a: number) { return a }"]
    incomplete_code_samples = ["function g() {", "const xs = [1,", "if (true) {"]
    invalid_code_samples = ["let = )", "1 +* 2"]

    code_generate_error = 'throw new Error("generated on purpose")'

    code_execute_result = [
        {"code": "6 * 7", "result": "42"},
        {"code": "'hu' + 'sh'", "result": "'hush'"},
    ]

    code_display_data = [
        {"code": "display({ shown: true })", "mime": "text/plain"},
    ]

    code_history_pattern = "6 *"
    supported_history_operations = ("tail", "range", "search")

    code_inspect_sample = "Math.max"


if __name__ == "__main__":
    unittest.main()
