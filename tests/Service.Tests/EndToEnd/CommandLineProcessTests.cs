using System.Diagnostics;
using System.Net;
using System.Net.Sockets;

namespace Bitbudget.Service.Tests.EndToEnd;

/// <summary>
/// The real binary as a user starts it: help and version answer without starting the service (no ./data, no key),
/// and a service whose address is taken says so in one line instead of an exception dump (exit 134 before).
/// </summary>
public sealed class CommandLineProcessTests : IDisposable
{
    private readonly string folder = Directory.CreateTempSubdirectory("bitbudget-cli-").FullName;

    [Theory]
    [InlineData("--help")]
    [InlineData("-h")]
    [InlineData("--version")]
    [InlineData("help")]
    [InlineData("serve", "--help")]
    public async Task HelpAndVersionAnswerWithoutStartingTheService(params string[] args)
    {
        var (exitCode, stdout, stderr) = await RunAsync(args);

        Assert.True(exitCode == 0, $"exit {exitCode}\n{stdout}\n{stderr}");
        Assert.Empty(stderr);
        Assert.NotEmpty(stdout.Trim());
        Assert.DoesNotContain("Now listening", stdout, StringComparison.Ordinal);

        // The service would have created ./data (and a key in it) in the working folder.
        Assert.Empty(Directory.GetFileSystemEntries(folder));
    }

    [Fact]
    public async Task ABusyPortIsOneLineAndAStartupExitCode()
    {
        using var taken = new TcpListener(IPAddress.Loopback, 0);
        taken.Start();
        var port = ((IPEndPoint)taken.LocalEndpoint).Port;

        var (exitCode, stdout, stderr) = await RunAsync("serve", "--urls", $"http://127.0.0.1:{port}", $"--Bitbudget:DataFolder={Path.Combine(folder, "data")}");

        Assert.True(exitCode == 78, $"exit {exitCode}\n{stdout}\n{stderr}");
        var line = Assert.Single(stderr.Split('\n', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries));
        Assert.StartsWith($"error: Failed to bind to address http://127.0.0.1:{port}", line, StringComparison.Ordinal);
        Assert.Contains("--urls http://127.0.0.1:PORT", line, StringComparison.Ordinal);
        Assert.DoesNotContain("   at ", stdout + stderr, StringComparison.Ordinal);
    }

    public void Dispose() => Directory.Delete(folder, recursive: true);

    private async Task<(int ExitCode, string Stdout, string Stderr)> RunAsync(params string[] args)
    {
        var start = new ProcessStartInfo("dotnet")
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
            WorkingDirectory = folder,
        };
        start.ArgumentList.Add(Path.Combine(AppContext.BaseDirectory, "Bitbudget.Service.dll"));
        foreach (var arg in args)
        {
            start.ArgumentList.Add(arg);
        }

        start.Environment["BITBUDGET_API_KEYS"] = "cli-process-key";
        using var process = Process.Start(start)!;
        var stdout = process.StandardOutput.ReadToEndAsync();
        var stderr = process.StandardError.ReadToEndAsync();
        try
        {
            await process.WaitForExitAsync().WaitAsync(TimeSpan.FromSeconds(60));
        }
        catch (TimeoutException)
        {
            process.Kill(entireProcessTree: true);
            throw;
        }

        return (process.ExitCode, await stdout, await stderr);
    }
}
