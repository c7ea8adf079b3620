using System.Diagnostics;

namespace Bitbudget.Service.Tests.Demo;

/// <summary>Runs a Python snippet under Debian's /usr/bin/python3 (which has NumPy) and returns its standard output; any failure fails the test.</summary>
internal static class NumPyProcess
{
    private const string Python = "/usr/bin/python3";

    public static string Run(string script, params string[] arguments)
    {
        if (!File.Exists(Python))
        {
            throw new InvalidOperationException($"{Python} is missing; these checks need Debian's python3 with python3-numpy (apt-get install python3-numpy).");
        }

        var start = new ProcessStartInfo(Python)
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        start.ArgumentList.Add("-c");
        start.ArgumentList.Add(script);
        foreach (string argument in arguments)
        {
            start.ArgumentList.Add(argument);
        }

        using Process process = Process.Start(start) ?? throw new InvalidOperationException($"could not start {Python}");
        Task<string> output = process.StandardOutput.ReadToEndAsync();
        Task<string> error = process.StandardError.ReadToEndAsync();
        if (!process.WaitForExit(120_000))
        {
            process.Kill();
            throw new TimeoutException("the NumPy check did not finish within two minutes");
        }

        if (process.ExitCode != 0)
        {
            throw new InvalidOperationException($"the NumPy check failed (exit {process.ExitCode}); is python3-numpy installed? {error.Result}");
        }

        return output.Result;
    }
}
