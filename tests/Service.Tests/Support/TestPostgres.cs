using System.Diagnostics;
using Npgsql;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// The PostgreSQL server the tests use, named by BITBUDGET_TEST_POSTGRES (an Npgsql connection string that may
/// create databases; scripts/start-test-postgres.sh starts one on 127.0.0.1 and prints it). Each test gets a
/// fresh database of its own, dropped when it ends. Outside CI a missing variable starts the script's server; on
/// CI (CI=true) it fails the test: .ci/run must have started one.
/// </summary>
internal static class TestPostgres
{
    public const string Variable = "BITBUDGET_TEST_POSTGRES";

    private static readonly Lazy<string> Server = new(FindOrStart);

    /// <summary>Creates an empty database and returns its connection string.</summary>
    public static string CreateDatabase()
    {
        var name = "bitbudget_t_" + Guid.NewGuid().ToString("N")[..16];
        using (var admin = new NpgsqlConnection(Server.Value))
        {
            admin.Open();
            using var create = new NpgsqlCommand($"CREATE DATABASE {name};", admin);
            create.ExecuteNonQuery();
        }

        return new NpgsqlConnectionStringBuilder(Server.Value) { Database = name }.ToString();
    }

    public static void DropDatabase(string connectionString)
    {
        var name = new NpgsqlConnectionStringBuilder(connectionString).Database;
        NpgsqlConnection.ClearAllPools();
        using var admin = new NpgsqlConnection(Server.Value);
        admin.Open();
        using var drop = new NpgsqlCommand($"DROP DATABASE IF EXISTS {name} WITH (FORCE);", admin);
        drop.ExecuteNonQuery();
    }

    private static string FindOrStart()
    {
        if (Environment.GetEnvironmentVariable(Variable) is { Length: > 0 } given)
        {
            return given;
        }

        Assert.False(
            Environment.GetEnvironmentVariable("CI") == "true",
            $"{Variable} is not set: .ci/run must start PostgreSQL (scripts/start-test-postgres.sh) before the tests.");
        var script = Path.Combine(RepositoryRoot(), "scripts", "start-test-postgres.sh");
        var start = new ProcessStartInfo("bash", [script]) { RedirectStandardOutput = true, UseShellExecute = false };
        using var process = Process.Start(start)!;
        var output = process.StandardOutput.ReadToEnd();
        process.WaitForExit();
        Assert.True(process.ExitCode == 0, $"{script} failed (exit {process.ExitCode}); start PostgreSQL and set {Variable}.");
        var line = output.Split('\n').Single(l => l.StartsWith($"export {Variable}=", StringComparison.Ordinal));
        return line[$"export {Variable}=".Length..].Trim('\'');
    }

    private static string RepositoryRoot()
    {
        var folder = new DirectoryInfo(AppContext.BaseDirectory);
        while (folder is not null && !File.Exists(Path.Combine(folder.FullName, "Search.sln")))
        {
            folder = folder.Parent;
        }

        return folder?.FullName ?? throw new DirectoryNotFoundException("Search.sln not found above the test binaries.");
    }
}
