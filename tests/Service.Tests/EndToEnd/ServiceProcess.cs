using System.Diagnostics;
using System.Net;
using System.Net.Http.Headers;
using System.Net.Sockets;

namespace Bitbudget.Service.Tests.EndToEnd;

/// <summary>
/// The real service binary (the Bitbudget.Service.dll built beside the tests) started as its own
/// process on a free loopback port, over a data folder the test owns. <see cref="Crash"/> kills it
/// without warning, as a power cut or an OOM kill would.
/// </summary>
internal sealed class ServiceProcess : IDisposable
{
    public const string ApiKey = "e2e-key-71d0";

    private readonly Process _process;

    private ServiceProcess(Process process, int port)
    {
        _process = process;
        Client = new HttpClient { BaseAddress = new Uri($"http://127.0.0.1:{port}"), Timeout = TimeSpan.FromSeconds(30) };
        Client.DefaultRequestHeaders.Authorization = new AuthenticationHeaderValue("Bearer", ApiKey);
    }

    public HttpClient Client { get; }

    /// <summary>Where the service listens, e.g. http://127.0.0.1:40123.</summary>
    public Uri BaseAddress => Client.BaseAddress!;

    /// <summary>The process id, which names the worker in the store (machine:pid).</summary>
    public int ProcessId => _process.Id;

    /// <summary>Starts the binary and waits until /healthz answers.</summary>
    /// <param name="settings">More command-line settings, e.g. <c>--Bitbudget:Role=worker</c>.</param>
    public static async Task<ServiceProcess> StartAsync(string dataFolder, params string[] settings)
    {
        var port = FreePort();
        var binary = Path.Combine(AppContext.BaseDirectory, "Bitbudget.Service.dll");
        var start = new ProcessStartInfo("dotnet")
        {
            // Short lease and recovery interval so a crashed search is picked up within seconds, not minutes.
            ArgumentList =
            {
                binary, "serve", "--urls", $"http://127.0.0.1:{port}",
                $"--Bitbudget:DataFolder={dataFolder}", "--Bitbudget:LeaseSeconds=4", "--Bitbudget:RecoveryIntervalSeconds=5",
            },
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
            WorkingDirectory = dataFolder,
        };
        foreach (var setting in settings)
        {
            start.ArgumentList.Add(setting);
        }

        start.Environment["BITBUDGET_API_KEYS"] = ApiKey;
        var process = Process.Start(start)!;
        process.OutputDataReceived += (_, _) => { };
        process.ErrorDataReceived += (_, _) => { };
        process.BeginOutputReadLine();
        process.BeginErrorReadLine();
        var service = new ServiceProcess(process, port);
        var deadline = DateTime.UtcNow.AddSeconds(60);
        while (DateTime.UtcNow < deadline)
        {
            Assert.False(process.HasExited, $"The service exited with code {(process.HasExited ? process.ExitCode : 0)} while starting.");
            try
            {
                if ((await service.Client.GetAsync("/healthz")).StatusCode == HttpStatusCode.OK)
                {
                    return service;
                }
            }
            catch (HttpRequestException)
            {
                // Not listening yet.
            }

            await Task.Delay(200);
        }

        service.Dispose();
        throw new TimeoutException("The service did not answer /healthz within 60 s.");
    }

    /// <summary>Kills the process at once (SIGKILL), with no chance to clean up.</summary>
    public void Crash()
    {
        _process.Kill(entireProcessTree: true);
        _process.WaitForExit();
    }

    public void Dispose()
    {
        Client.Dispose();
        if (!_process.HasExited)
        {
            Crash();
        }

        _process.Dispose();
    }

    private static int FreePort()
    {
        using var listener = new TcpListener(IPAddress.Loopback, 0);
        listener.Start();
        return ((IPEndPoint)listener.LocalEndpoint).Port;
    }
}
