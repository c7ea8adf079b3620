using System.Data.Common;
using System.Globalization;

namespace Bitbudget.Service.Store;

/// <summary>Small helpers that keep the store's queries free of provider types.</summary>
internal static class DbCommands
{
    /// <summary>Creates a command on <paramref name="connection"/>, in <paramref name="transaction"/> when given.</summary>
    public static DbCommand Command(this DbConnection connection, string sql, DbTransaction? transaction = null)
    {
        var command = connection.CreateCommand();
        command.CommandText = sql;
        command.Transaction = transaction;
        return command;
    }

    /// <summary>Adds a parameter; null is stored as SQL NULL.</summary>
    public static DbCommand With(this DbCommand command, string name, object? value)
    {
        var parameter = command.CreateParameter();
        parameter.ParameterName = name;
        parameter.Value = value ?? DBNull.Value;
        command.Parameters.Add(parameter);
        return command;
    }

    /// <summary>An integer column as int whatever width the database gives it (SQLite: 64-bit; PostgreSQL: as declared).</summary>
    public static int Int(this DbDataReader reader, int ordinal) => Convert.ToInt32(reader.GetValue(ordinal), CultureInfo.InvariantCulture);

    public static long Long(this DbDataReader reader, int ordinal) => Convert.ToInt64(reader.GetValue(ordinal), CultureInfo.InvariantCulture);

    public static int? IntOrNull(this DbDataReader reader, int ordinal) => reader.IsDBNull(ordinal) ? null : reader.Int(ordinal);

    public static long? LongOrNull(this DbDataReader reader, int ordinal) => reader.IsDBNull(ordinal) ? null : reader.Long(ordinal);

    public static double? DoubleOrNull(this DbDataReader reader, int ordinal) => reader.IsDBNull(ordinal) ? null : reader.GetDouble(ordinal);

    public static string? StringOrNull(this DbDataReader reader, int ordinal) => reader.IsDBNull(ordinal) ? null : reader.GetString(ordinal);

    public static long ScalarLong(this DbCommand command) => Convert.ToInt64(command.ExecuteScalar(), CultureInfo.InvariantCulture);
}
