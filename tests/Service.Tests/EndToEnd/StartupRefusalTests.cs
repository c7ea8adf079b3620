using System.Diagnostics;

namespace Bitbudget.Service.Tests.EndToEnd;

/// <summary>
/// The real binary with a setting out of range: one line on standard error naming the setting and its range,
/// and exit code 78 (EX_CONFIG, BSD sysexits.h). Before, the options exception went unhandled: a stack trace
/// and SIGABRT (exit 134, a core dump).
/// </summary>
public sealed class StartupRefusalTests
{
    [Theory]
    [InlineData("--Bitbudget:RecoveryIntervalSeconds=2", "error: Bitbudget:RecoveryIntervalSeconds must lie between 5 and 3600; got 2.")]
    [InlineData("--Bitbudget:Workers=abc", "error: Setting Bitbudget:Workers must be a whole number; got 'abc'.")]
    public async Task AnInvalidSettingStopsStartUpWithOneLineAndAConfigurationExitCode(string setting, string expected)
    {
        var data = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));
        Directory.CreateDirectory(data);
        try
        {
            var start = new ProcessStartInfo("dotnet")
            {
                ArgumentList = { Path.Combine(AppContext.BaseDirectory, "Bitbudget.Service.dll"), "serve", "--urls", "http://127.0.0.1:0", $"--Bitbudget:DataFolder={data}", setting },
                RedirectStandardOutput = true,
                RedirectStandardError = true,
                UseShellExecute = false,
                WorkingDirectory = data,
            };
            start.Environment["BITBUDGET_API_KEYS"] = "e2e-key";
            using var process = Process.Start(start)!;
            var stderr = process.StandardError.ReadToEndAsync();
            var stdout = process.StandardOutput.ReadToEndAsync();
            await process.WaitForExitAsync().WaitAsync(TimeSpan.FromSeconds(60));

            Assert.Equal(78, process.ExitCode);
            Assert.Equal([expected], (await stderr).Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries));
            Assert.DoesNotContain("   at ", await stdout, StringComparison.Ordinal);
        }
        finally
        {
            Directory.Delete(data, recursive: true);
        }
    }
}
